#!/usr/bin/env python3
"""Write the invented demo region's input files (fixed seed, reproducible).

The Zephyrine Plateau is made up: a karst plateau with five hydrostratigraphic
units, a tight shale aquitard between two limestone aquifers, one large
spring in an incised valley, a sinkhole-plain recharge area, 40 wells (six of
them multi-zone), four pumping wells and three years of monthly heads. No
place, well, spring or value here comes from a real site.

Run ``python demo_region/generate.py [OUTDIR]``; by default it writes into hydroatlas/demo_data/, the package
data that ``hydroatlas demo`` reads (so the demo also runs from an installed wheel).
"""

from __future__ import annotations

import csv
import json
import sys
from pathlib import Path

import numpy as np

SEED = 20261201
CRS = "EPSG:32616"          # projected, metres; coordinates are invented
X0, Y0 = 610_000.0, 4_100_000.0
WIDTH, HEIGHT = 20_000.0, 15_000.0
SPRING = (X0 + 1_500.0, Y0 + 7_500.0)

UNITS = [
    # code, name, rank, role, log10 K mean (m/s), log10 K sd, (min, max) m/s clip, K unit written in the file
    ("CAP", "Ridgecap sandstone", 1, "aquifer", -6.9, 0.35, (1.2e-8, 9.0e-7), "cm/s"),
    ("ULS", "Upper karst limestone", 2, "aquifer", -4.45, 0.55, (1.1e-6, 9.0e-3), "ft/d"),
    ("SHL", "Parting shale", 3, "aquitard", -10.0, 0.35, (1.1e-13, 9.0e-10), "m/s"),
    ("LCL", "Lower cherty limestone", 4, "aquifer", -5.2, 0.45, (1.1e-6, 9.0e-3), "m/d"),
    ("BSH", "Basal shale", 5, "confining", -10.6, 0.3, (1.1e-13, 9.0e-10), "m/s"),
]


def ground(x, y):
    """Ground elevation (m): plateau rising east, cut by the spring valley."""
    lx, ly = x - X0, y - Y0
    valley = 32.0 * np.exp(-((y - SPRING[1]) ** 2) / (2 * 1_200.0**2)) * np.exp(-(lx / 6_000.0))
    return 262.0 + 0.0025 * lx + 3.0 * np.sin(lx / 1_700.0) * np.cos(ly / 2_300.0) - valley


def dip(x, y):
    return 0.0015 * (x - X0) + 0.0005 * (y - Y0)


def tops(x, y):
    """Top elevations (m) of ULS, SHL, LCL, BSH; CAP's top is the ground where present."""
    d = dip(x, y)
    return {"ULS": 236.0 + d, "SHL": 176.0 + d, "LCL": 161.0 + d, "BSH": 81.0 + d}


def heads(x, y):
    """Long-term mean heads (m) per aquifer."""
    r = np.hypot(x - SPRING[0], y - SPRING[1])
    h_uls = 233.0 + 0.0030 * r
    h_lcl = 214.0 + 0.0016 * r
    return {"ULS": h_uls, "LCL": h_lcl, "CAP": ground(x, y) - 5.0}  # CAP: perched, near the surface


#: the drought of the head record (issue 14): heads fall linearly from DROUGHT[0] to their lowest at DROUGHT[1], by
#: DROUGHT_DROP metres per unit, and recover linearly by DROUGHT[2] (month indices from 2022-01, fractional)
DROUGHT = (17.0, 23.0, 31.0)  # June 2023, December 2023, August 2024
DROUGHT_DROP = {"CAP": 1.8, "ULS": 2.6, "SHL": 1.3, "LCL": 0.9}
#: Lanternfall Spring (SP-1) follows the head of its index zone (the ULS monitoring screen nearest to it):
#: Q = SPRING_C (h - h0)^SPRING_N for h > h0, 0 below, with h0 = that zone's long-term head minus SPRING_H0_BELOW
SPRING_N = 1.5
SPRING_H0_BELOW = 5.0  # m
SPRING_Q_MEAN = 28_000.0  # m3/d at the long-term head


def season_term(month):
    """Seasonal swing (fraction of the unit's amplitude) at a fractional month index from 2022-01."""
    return np.sin(2 * np.pi * (np.asarray(month, dtype=float) - 2) / 12.0)


def drought_term(month):
    """Drought decline as a fraction of DROUGHT_DROP (0 before and after, 1 at the lowest)."""
    m = np.asarray(month, dtype=float)
    a, b, c = DROUGHT
    return np.clip(np.where(m <= b, (m - a) / (b - a), (c - m) / (c - b)), 0.0, 1.0)


def smooth_field(rng, n_waves=6, scale=6_000.0):
    """A smooth random field on the plateau with unit variance (sum of random cosines)."""
    k = rng.normal(size=(n_waves, 2)) / scale
    phase = rng.uniform(0, 2 * np.pi, n_waves)

    def f(x, y):
        arg = np.outer(x - X0, k[:, 0]) + np.outer(y - Y0, k[:, 1]) + phase
        return np.sqrt(2.0 / n_waves) * np.cos(arg).sum(axis=1)
    return f


def unit_interval(code, x, y):
    """(top_elev, bottom_elev) of a unit at one point; None where eroded."""
    g = float(ground(x, y))
    t = {k: float(v) for k, v in tops(x, y).items()}
    if code == "CAP":
        return (g, t["ULS"]) if g > t["ULS"] + 0.5 else None
    order = ["ULS", "SHL", "LCL", "BSH"]
    i = order.index(code)
    top = min(t[code], g)
    bottom = t[order[i + 1]] if i + 1 < len(order) else t[code] - 60.0
    return (top, bottom) if top > bottom else None


def build(out: Path) -> dict[str, int]:
    rng = np.random.default_rng(SEED)
    out.mkdir(parents=True, exist_ok=True)
    fields = {u[0]: smooth_field(rng) for u in UNITS}

    wells, picks, zones = [], [], []
    plan = ([("monitoring", "ULS")] * 20 + [("monitoring", "LCL")] * 3 + [("multizone", None)] * 6
            + [("supply", "ULS")] * 3 + [("pumping", "LCL")] + [("monitoring", "NOPICK")] * 4
            + [("monitoring", "STRADDLE")] + [("monitoring", "CAP")] * 2)
    names = iter(["Old Quarry Road", "Fenceline North", "Sinkhole Field", "Ridge Barn", "Mill Lane",
                  "Cistern Hill", "Dry Hollow", "School Well", "Lantern Farm", "Hollow Oak"])
    for i, (kind, target) in enumerate(plan):
        wid = f"ZP-{i + 1:03d}"
        x = X0 + rng.uniform(1_500, WIDTH - 800)
        y = Y0 + rng.uniform(800, HEIGHT - 800)
        if kind == "multizone":
            x = X0 + 2_500 + (i % 6) * 3_000 + rng.uniform(-300, 300)
        g = float(ground(x, y))
        iv = {u[0]: unit_interval(u[0], x, y) for u in UNITS}
        if target == "CAP" and iv["CAP"] is None:
            target = "ULS"
        if kind == "multizone" or target == "LCL" or kind == "pumping":
            td = g - (iv["LCL"][0] - 62.0)
        else:
            td = g - (iv["SHL"][0] - 4.0)  # drilled a few metres into the shale
        td = round(td, 2)
        name = next(names) if i % 4 == 0 else ""
        wells.append([wid, round(x, 1), round(y, 1), round(g, 2), td, kind, name])
        if target != "NOPICK":
            for code, *_ in UNITS:
                if iv[code] is None:
                    continue
                top_d, bot_d = g - iv[code][0], g - iv[code][1]
                if top_d >= td:
                    break
                picks.append([wid, code, round(max(top_d, 0.0), 2), round(min(bot_d, td), 2)])

        def zone(zid, code, length, zkind, override=""):
            top_e, bot_e = iv[code]
            mid = 0.5 * (top_e + bot_e)
            top_d = g - (mid + length / 2)
            zones.append([wid, zid, round(max(top_d, 0.5), 2), round(top_d + length, 2), zkind, override, code])

        if kind == "multizone":
            for j, code in enumerate(["CAP", "ULS", "SHL", "LCL"]):
                if iv[code] is not None:
                    zone(f"P{j + 1}", code, 6.0 if code != "SHL" else 4.0, "port" if code != "SHL" else "packer")
        elif target == "STRADDLE":
            contact = g - iv["SHL"][0]
            zones.append([wid, "S1", round(contact - 7.0, 2), round(contact + 3.0, 2), "screen", "", "ULS"])
        elif target == "NOPICK":
            zone("S1", "ULS", 8.0, "screen")
        elif kind in ("supply", "pumping"):
            zone("S1", target, 30.0, "open_hole")
        else:
            zone("S1", target, 6.0, "screen", override="CAP" if (target == "CAP" and i % 2) else "")

    # K tests: a smooth log-K field per unit plus test-scale scatter, clipped to the unit's range.
    ktests = []
    kparams = {u[0]: u for u in UNITS}
    wxy = {w[0]: (w[1], w[2]) for w in wells}
    for wid, zid, top_d, bot_d, zkind, override, code in zones:
        _, _, _, _, mu, sd, (lo, hi), kunit = kparams[code]
        x, y = wxy[wid]
        base = mu + sd * (0.8 * fields[code](np.array([x]), np.array([y]))[0])
        method = "packer" if zkind == "packer" else ("pumping" if zkind == "open_hole" else "slug")
        n_tests = 1 if method == "pumping" else int(rng.integers(1, 4))
        for t in range(n_tests):
            log_k = base + sd * 0.6 * rng.normal()
            k_ms = float(np.clip(10 ** log_k, lo, hi))
            from_ms = {"m/s": 1.0, "m/d": 86_400.0, "cm/s": 100.0, "ft/d": 86_400.0 / 0.3048}[kunit]
            q = rng.choice(["good", "good", "good", "good", "good", "fair", "poor"])
            day = f"2022-{int(rng.integers(4, 10)):02d}-{int(rng.integers(1, 28)):02d}"
            ktests.append([wid, zid, day, method, f"{k_ms * from_ms:.4g}", kunit, q, "demo field campaign"])

    # Heads: monthly readings 2022-01 to 2024-12; a seasonal swing, noise, and pumping cones.
    pumpers = [w for w in wells if w[5] in ("supply", "pumping")]
    head_rows = []
    months = [f"{yy}-{mm:02d}-15T10:00:00" for yy in (2022, 2023, 2024) for mm in range(1, 13)]
    season = season_term(np.arange(36))
    drought = drought_term(np.arange(36))
    zone_base = {}  # (well, zone) -> (x, y, long-term head, seasonal amplitude, unit) for the spring's index zone
    for wid, zid, top_d, bot_d, zkind, override, code in zones:
        x, y = wxy[wid]
        g = float(ground(x, y))
        h = {k: float(v) for k, v in heads(x, y).items()}
        if code == "SHL":
            frac = 0.5
            base = h["ULS"] * (1 - frac) + h["LCL"] * frac
            amp = 0.6
        else:
            base = h[code]
            amp = 1.6 if code in ("ULS", "CAP") else 0.5
        for p in pumpers:
            if p[5] == "supply" and code in ("ULS",) or p[5] == "pumping" and code == "LCL":
                r = max(np.hypot(x - p[1], y - p[2]), 50.0)
                base -= max(0.0, 1.2 * np.log(3_000.0 / r))
        base = min(base, g - 1.0)
        zone_base[(wid, zid)] = (x, y, base, amp, code, zkind)
        ref = round(g + 0.6, 2)
        drop = DROUGHT_DROP.get(code, 0.0)
        for m, when in enumerate(months):
            val = base + amp * season[m] - drop * drought[m] + 0.12 * rng.normal()
            if zkind == "screen" and m % 2 == 0:
                head_rows.append([wid, zid, when, "", f"{ref - val:.2f}", f"{ref:.2f}", "good"])
            else:
                head_rows.append([wid, zid, when, f"{val:.2f}", "", "", "good"])

    # Slug tests at a few screened ULS wells: Hvorslev recoveries (slug in and slug out at different H0) from the
    # zone's K. The noise draws come from the main generator, so the files after this section are unchanged.
    slug_rows, slug_geom = [], []
    known = []  # test, well/zone, response, model, known K (m/s): written into README.md by hand from this list
    rc, rw, screen = 0.0254, 0.0508, 6.0
    screened = [z for z in zones if z[4] == "screen" and z[6] == "ULS"]
    for wid, zid, top_d, bot_d, zkind, override, code in screened[:5]:
        _, _, _, _, mu, sd, (lo, hi), _ = kparams[code]
        x, y = wxy[wid]
        k_ms = float(np.clip(10 ** (mu + sd * 0.8 * fields[code](np.array([x]), np.array([y]))[0]), lo, hi))
        t0 = rc * rc * np.log(screen / rw) / (2 * screen * k_ms)
        for n, h0 in enumerate((0.5, -0.3), start=1):
            tid = f"SL{n}"
            for t in np.linspace(0, 3 * t0, 40):
                noise = 1 + 0.005 * rng.normal()  # 0.5 % of the reading
                slug_rows.append([wid, zid, tid, f"{t:.3f}", f"{h0 * np.exp(-t / t0) * noise:.5f}"])
            slug_geom.append([wid, zid, tid, rc, rw, screen, "", "", f"2022-05-{10 + n:02d}", "", "", ""])
            known.append((tid, f"{wid}/{zid}", "overdamped", "Hvorslev (1951)", k_ms))
    _more_slug_tests(zones, wxy, slug_rows, slug_geom, known, screened)

    pumping = []
    rates = [("1500", "m3/d"), ("350", "gpm"), ("12", "L/s"), ("900", "m3/d")]
    for p, (rate, unit) in zip(pumpers, rates):
        pumping.append([p[0], "S1", rate, unit, "2021-06-01T00:00:00", ""])

    # springs issue where the unit's head meets the ground: their elevation is a head of that unit
    sp2 = (X0 + 3_200.0, Y0 + 11_800.0)
    springs = [["SP-1", round(SPRING[0], 1), round(SPRING[1], 1), round(float(heads(*SPRING)["ULS"]), 2),
                "Lanternfall Spring", "ULS"],
               ["SP-2", round(sp2[0], 1), round(sp2[1], 1), round(float(heads(*sp2)["ULS"]) - 1.5, 2),
                "Wren Seep", "ULS"]]
    # SP-1 follows the noise-free head of its index zone (weekly gaugings, 5 % reading noise); SP-2, a small seep,
    # is gauged monthly in L/s and follows SP-1
    index = min(((w, z) for (w, z), v in zone_base.items() if v[4] == "ULS" and v[5] == "screen"
                 and dict((r[0], r[5]) for r in wells)[w] == "monitoring"),
                key=lambda k: np.hypot(zone_base[k][0] - SPRING[0], zone_base[k][1] - SPRING[1]))
    _, _, h_mean, amp, _, _ = zone_base[index]
    h0 = h_mean - SPRING_H0_BELOW
    c = SPRING_Q_MEAN / SPRING_H0_BELOW ** SPRING_N
    days = np.arange(0, 1092, 7)  # from 2022-01-03
    month = days / (365.25 / 12.0) + (3 - 15) / 30.4  # readings of month m are on the 15th: day 0 is 2022-01-03
    h_true = h_mean + amp * season_term(month) - DROUGHT_DROP["ULS"] * drought_term(month)
    discharge = []
    for d, h in zip(days, h_true):
        q1 = c * max(h - h0, 0.0) ** SPRING_N * float(np.exp(0.05 * rng.normal()))
        when = (np.datetime64("2022-01-03T09:00") + np.timedelta64(int(d), "D")).astype(str)
        discharge.append(["SP-1", when, f"{q1:.0f}", "m3/d"])
    for m, when in enumerate(months):
        q2 = SPRING_Q_MEAN / 40.0 / 86.4 * (1 + 0.35 * season[m]) * float(np.exp(0.1 * rng.normal()))
        discharge.append(["SP-2", when, f"{q2:.2f}", "L/s"])

    _write(out / "units.csv", ["code", "name", "rank", "role", "parent"],
           [[u[0], u[1], u[2], u[3], ""] for u in UNITS])
    _write(out / "wells.csv", ["well_id", "x", "y", "ground_elev", "total_depth", "kind", "name"], wells)
    _write(out / "picks.csv", ["well_id", "unit", "top_depth", "bottom_depth"], picks)
    _write(out / "zones.csv", ["well_id", "zone_id", "top_depth", "bottom_depth", "kind", "unit"],
           [z[:6] for z in zones])
    _write(out / "ktests.csv", ["well_id", "zone_id", "tested_on", "method", "k", "k_unit", "quality", "source"],
           ktests)
    _write(out / "heads.csv", ["well_id", "zone_id", "measured_at", "head", "depth_to_water", "ref_elev", "quality"],
           head_rows)
    _write(out / "pumping.csv", ["well_id", "zone_id", "rate", "rate_unit", "start", "end"], pumping)
    _write(out / "slugtests.csv", ["well_id", "zone_id", "test_id", "t_s", "displacement"], slug_rows)
    _write(out / "sluggeometry.csv", ["well_id", "zone_id", "test_id", "casing_radius", "well_radius",
                                      "screen_length", "aquifer_thickness", "static_depth", "tested_on",
                                      "screen_top_depth", "confined", "geometry_kind"], slug_geom)
    _write(out / "springs.csv", ["spring_id", "x", "y", "elev", "name", "unit"], springs)
    _write(out / "discharge.csv", ["spring_id", "measured_at", "discharge", "rate_unit"], discharge)
    _write_areas(out / "areas.geojson")
    (out / "crs.txt").write_text(CRS + "\n")
    return {"wells": len(wells), "zones": len(zones), "ktests": len(ktests), "heads": len(head_rows),
            "slug tests": len(slug_geom), "known slug K": known,
            "spring index zone": "/".join(index), "spring cease-flow head": round(float(h0), 2),
            "spring relation": f"Q = {c:.1f} (h - {h0:.2f})^{SPRING_N} m3/d"}


G = 9.80665  # m/s2, standard gravity
WATER_VISCOSITY = 1.0e-6  # m2/s, kinematic viscosity of water near 20 degrees C (from memory)
SLUG_SEED = SEED + 12  # the slug tests added for issue 12 draw their noise from their own generator


def bouwer_rice_ln_re_rw(rw, le, lw, h):
    """ln(Re/rw) of Bouwer and Rice (1976), with the polynomial fits of A, B, C in Le/rw (Van Rooy 1988, as
    reproduced with Butler 1998); ln((H - Lw)/rw) capped at 6."""
    x = le / rw
    a = 1.4720 + 3.537e-2 * x - 8.148e-5 * x**2 + 1.028e-7 * x**3 - 6.484e-11 * x**4 + 1.573e-14 * x**5
    b = 0.2372 + 5.151e-3 * x - 2.682e-6 * x**2 - 3.491e-10 * x**3 + 4.738e-13 * x**4
    c = 0.7920 + 3.993e-2 * x - 5.743e-5 * x**2 + 3.858e-8 * x**3 - 9.659e-12 * x**4
    first = 1.1 / np.log(lw / rw)
    if h - lw <= 1e-9 * h:
        return 1.0 / (first + c / x)
    d = a + b * min(np.log((h - lw) / rw), 6.0)
    assert d >= c  # the partially penetrating form, away from its join with the fully penetrating one
    return 1.0 / (first + d / x)


def cbp_head(alpha, beta):
    """H/H0 of Cooper, Bredehoeft and Papadopulos (1967) at alpha = rw^2 S / rc^2 and beta = T t / rc^2.

    (8 alpha / pi^2) * integral over u > 0 of exp(-beta u^2 / alpha) / (u D(u)) du, with
    D(u) = (u J0(u) - 2 alpha J1(u))^2 + (u Y0(u) - 2 alpha Y1(u))^2, by adaptive quadrature on pieces.
    """
    from scipy import integrate, special

    def f(u):
        d = (u * special.j0(u) - 2 * alpha * special.j1(u)) ** 2 + (u * special.y0(u) - 2 * alpha * special.y1(u)) ** 2
        return np.exp(-beta * u * u / alpha) / (u * d)

    top = np.sqrt(alpha / beta) * 9.0  # exp(-81) beyond
    edges = np.concatenate([[0.0], np.geomspace(1e-8, top, 60)])
    total = sum(integrate.quad(f, a, b, limit=200, epsabs=0, epsrel=1e-10)[0] for a, b in zip(edges[:-1], edges[1:]))
    return 8 * alpha / np.pi**2 * total


def oscillator_head(t, *, c_d, le):
    """Normalised head of the damped oscillator d2w/dtd2 + C_D dw/dtd + w = 0, w(0) = 1, w'(0) = 0,
    td = t sqrt(g/Le) (Butler 1998; Butler, Garnett and Healey 2003), underdamped (C_D < 2)."""
    td = np.asarray(t, float) * np.sqrt(G / le)
    w = np.sqrt(1.0 - c_d * c_d / 4.0)
    return np.exp(-c_d * td / 2.0) * (np.cos(w * td) + c_d / (2.0 * w) * np.sin(w * td))


def _more_slug_tests(zones, wxy, slug_rows, slug_geom, known, screened):
    """A double-straight-line record, an oscillating response, a confined packer interval and a tight unit.

    Each comes from its model's own equation with a known K (listed in README.md).
    """
    rng = np.random.default_rng(SLUG_SEED)
    zone_of = {(z[0], z[1]): z for z in zones}

    def rows(wid, zid, tid, t, h):
        for tt, hh in zip(t, h):
            slug_rows.append([wid, zid, tid, f"{tt:.3f}", f"{hh:.5f}"])

    # 1. Double straight line (unconfined ULS screen, Bouwer and Rice geometry): 35 % of H0 drains from the
    #    filter pack with a tenth of the formation's time constant, then the formation's recovery.
    wid, zid, top_d, bot_d, *_ = screened[5]
    x, y = wxy[wid]
    g = float(ground(x, y))
    static = round(g - float(heads(x, y)["ULS"]), 2)
    thickness = round(float(heads(x, y)["ULS"]) - float(tops(x, y)["SHL"]), 2)
    rc_, rw_, le = 0.0254, 0.0762, round(bot_d - top_d, 2)
    lw = bot_d - static
    k_ms = 4.0e-5
    ln_re = bouwer_rice_ln_re_rw(rw_, le, lw, thickness)
    tau = rc_ * rc_ * ln_re / (2 * le * k_ms)
    for n, h0 in enumerate((0.6, -0.4), start=1):
        t = np.linspace(0, 3.5 * tau, 100)
        h = h0 * (0.35 * np.exp(-10 * t / tau) + 0.65 * np.exp(-t / tau)) + 0.002 * rng.normal(size=t.size)
        rows(wid, zid, f"DL{n}", t, h)
        slug_geom.append([wid, zid, f"DL{n}", rc_, rw_, le, thickness, static, f"2022-06-0{n + 1}", top_d, "false",
                          "screen"])
        known.append((f"DL{n}", f"{wid}/{zid}", "double straight line", "Bouwer and Rice (1976)", k_ms))

    # 2. Oscillating response in the karst limestone (ULS): Hvorslev-based high-K model with the laminar friction
    #    of the water column, (Le/g) w'' + (T0 + Tf) w' + w = 0, T0 = rc^2 ln(b/rw) / (2 K b),
    #    Tf = 8 nu Lc / (g rc^2), Lc = Le - (b/2)(rc/rw)^2 (Butler 1998; Butler, Garnett and Healey 2003).
    wid, zid, top_d, bot_d, *_ = screened[6]
    rc_, rw_, b = 0.0508, 0.0508, round(bot_d - top_d, 2)
    k_ms, le_col = 3.0e-3, 12.0
    friction = 8 * WATER_VISCOSITY * (le_col - 0.5 * b * (rc_ / rw_) ** 2) / (G * rc_ * rc_)
    c_d = (rc_ * rc_ * np.log(b / rw_) / (2 * k_ms * b) + friction) * np.sqrt(G / le_col)
    for n, h0 in enumerate((0.8, -0.4), start=1):
        t = np.arange(0.0, 40.0 + 1e-9, 0.2)
        h = h0 * oscillator_head(t, c_d=c_d, le=le_col) + 0.002 * rng.normal(size=t.size)
        rows(wid, zid, f"OS{n}", t, h)
        slug_geom.append([wid, zid, f"OS{n}", rc_, rw_, b, "", "", f"2022-06-1{n}", top_d, "false", "screen"])
        known.append((f"OS{n}", f"{wid}/{zid}", "oscillating", "damped oscillator, Hvorslev-based", k_ms))

    # 3. Confined packer interval with storage (LCL port below the parting shale): Cooper, Bredehoeft and
    #    Papadopulos (1967), alpha = rw^2 S / rc^2 with S = 7e-4 (specific storage about 1.2e-4 per m).
    wid, zid = next((z[0], z[1]) for z in zones if z[6] == "LCL" and z[4] == "port")
    top_d, bot_d = zone_of[(wid, zid)][2], zone_of[(wid, zid)][3]
    rc_, rw_, b = 0.0127, 0.048, round(bot_d - top_d, 2)
    k_ms, storativity = 2.0e-6, 7.0e-4
    alpha = rw_ * rw_ * storativity / (rc_ * rc_)
    trans = k_ms * b
    beta = np.geomspace(1e-3, 30.0, 120)
    t = np.concatenate([[0.0], beta * rc_ * rc_ / trans])
    h = np.concatenate([[1.0], [cbp_head(alpha, bb) for bb in beta]])
    for n, h0 in enumerate((1.5, -1.0), start=1):
        rows(wid, zid, f"PK{n}", t, h0 * h + 0.002 * rng.normal(size=t.size))
        slug_geom.append([wid, zid, f"PK{n}", rc_, rw_, b, b, "", f"2022-07-0{n + 4}", top_d, "true", "packer"])
        known.append((f"PK{n}", f"{wid}/{zid}", "confined, with storage", "Cooper, Bredehoeft and Papadopulos "
                      f"(1967), S = {storativity:g}", k_ms))

    # 4. Tight sandstone (CAP screen): an overdamped recovery that takes hours.
    wid, zid, top_d, bot_d, *_ = next(z for z in zones if z[6] == "CAP" and z[4] == "screen")
    rc_, rw_, b = 0.0254, 0.0508, round(bot_d - top_d, 2)
    k_ms = 1.5e-7
    t0 = rc_ * rc_ * np.log(b / rw_) / (2 * b * k_ms)
    t = np.linspace(0, 4 * t0, 60)
    rows(wid, zid, "TS1", t, 0.5 * np.exp(-t / t0) * (1 + 0.01 * rng.normal(size=t.size)))
    slug_geom.append([wid, zid, "TS1", rc_, rw_, b, "", "", "2022-07-12", "", "", ""])
    known.append(("TS1", f"{wid}/{zid}", "overdamped, tight unit", "Hvorslev (1951)", k_ms))


def _write(path: Path, header, rows):
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)


def _write_areas(path: Path):
    """Recharge area and model domain as RFC 7946 GeoJSON (WGS 84 longitude/latitude)."""
    from pyproj import Transformer

    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)

    def ring(points):
        pts = [tr.transform(x, y) for x, y in points]
        pts.append(pts[0])
        return [[round(lon, 7), round(lat, 7)] for lon, lat in pts]

    domain = [(X0, Y0), (X0 + WIDTH, Y0), (X0 + WIDTH, Y0 + HEIGHT), (X0, Y0 + HEIGHT)]
    t = np.linspace(0, 2 * np.pi, 24, endpoint=False)
    cx, cy = X0 + 15_500.0, Y0 + 8_000.0
    recharge = [(cx + 2_600 * np.cos(a) * (1 + 0.15 * np.sin(3 * a)), cy + 1_900 * np.sin(a)) for a in t]
    features = [
        {"type": "Feature", "properties": {"area_id": "DOMAIN", "kind": "domain", "unit": None,
                                           "label": "Model domain"},
         "geometry": {"type": "Polygon", "coordinates": [ring(domain)]}},
        {"type": "Feature", "properties": {"area_id": "RA-1", "kind": "recharge", "unit": "ULS",
                                           "label": "Sinkhole plain"},
         "geometry": {"type": "Polygon", "coordinates": [ring(recharge)]}},
    ]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}, indent=1) + "\n")


if __name__ == "__main__":
    target = (Path(sys.argv[1]) if len(sys.argv) > 1
              else Path(__file__).resolve().parent.parent / "hydroatlas" / "demo_data")
    counts = build(target)
    known = counts.pop("known slug K")
    print(", ".join(f"{k}: {v}" for k, v in counts.items()))
    for test, where, response, model, k in known:
        print(f"| {where} | {test} | {response} | {model} | {k:.4g} |")
