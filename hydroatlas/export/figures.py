"""Figures: head profiles, log10 K distributions, variogram fits and cross-validation plots.

Pure writers: data in, files out, no store access. Every function draws one
figure, writes it twice from the same output stem (``<stem>.png`` at 150 dpi
and ``<stem>.svg`` with live text), closes it and returns the paths written.

Colours come from the Okabe-Ito colour-blind-safe set; low-permeability units
are told apart by grey hatching as well as by colour, so the figures also read
in greyscale.
"""

from __future__ import annotations

import math
from pathlib import Path

import matplotlib
import matplotlib.ticker
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from ..errors import ParameterError
from .names import atomic_path

FOOTER = "Screening-level estimate; see the cautions in the README."
DPI = 150

# Okabe-Ito colour-blind-safe colours.
BLACK, ORANGE, SKY, GREEN, YELLOW, BLUE, VERMILLION, PURPLE = (
    "#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")

# Unit band styles by role: (face colour, alpha, hatch, legend label).
ROLE_STYLE = {
    "aquifer": (SKY, 0.22, None, "aquifer"),
    "aquitard": ("#8C8C8C", 0.35, "///", "aquitard"),
    "confining": ("#4D4D4D", 0.35, "xx", "confining unit"),
    "other": (YELLOW, 0.20, "..", "other"),
}

# ids and codes are drawn as typed: a "$" in a well id must not start mathtext (which may refuse to parse it)
_RC = {"svg.fonttype": "none", "svg.hashsalt": "hydroatlas", "hatch.color": "#555555", "font.size": 9,
       "text.parse_math": False}


def _write(fig, stem) -> list[Path]:
    """Save ``fig`` as ``<stem>.png`` (150 dpi) and ``<stem>.svg``; return both paths."""
    stem = Path(stem)
    paths = [stem.with_name(stem.name + ".png"), stem.with_name(stem.name + ".svg")]
    with atomic_path(paths[0]) as tmp:
        fig.savefig(tmp, dpi=DPI, metadata={"Software": "hydroatlas"})
    with atomic_path(paths[1]) as tmp:
        fig.savefig(tmp, metadata={"Date": None, "Creator": "hydroatlas"})
    return paths


def _render(stem, draw, *, figsize) -> list[Path]:
    """Create a figure, let ``draw(fig, ax)`` fill it, add the footer, write PNG + SVG."""
    with matplotlib.rc_context(_RC):
        # a figure of our own on the Agg canvas: neither pyplot's figure registry nor the user's backend is touched
        fig = Figure(figsize=figsize, layout="constrained")
        FigureCanvasAgg(fig)
        # (so nothing needs closing: the figure is freed with its last reference, also when drawing fails)
        ax = fig.add_subplot()
        fig.get_layout_engine().set(rect=(0, 0.035, 1, 0.965))
        draw(fig, ax)
        fig.text(0.01, 0.01, FOOTER, fontsize=7, color="#555555", ha="left", va="bottom")
        return _write(fig, stem)


def _require_columns(df, columns, name: str) -> pd.DataFrame:
    if not isinstance(df, pd.DataFrame):
        raise ParameterError(f"{name} must be a pandas DataFrame; got {type(df).__name__}")
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise ParameterError(f"{name} lacks column(s) {', '.join(missing)}; needs {', '.join(columns)}")
    return df


def _for_well(df: pd.DataFrame, well_id) -> pd.DataFrame:
    """Rows of ``well_id`` when the frame has a well_id column (so whole tables can be passed)."""
    return df[df["well_id"] == well_id] if "well_id" in df.columns else df


def _is_missing(value) -> bool:
    return value is None or (not isinstance(value, str) and bool(pd.isna(value))) or str(value).strip() == ""


def _as_float_array(values, name: str) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=float).ravel()
    except (TypeError, ValueError) as exc:
        raise ParameterError(f"{name} must be numbers: {exc}") from None
    return arr


def head_profile(stem, well_id, zones, units_at_well, pairs, *, length_unit="m") -> list[Path]:
    """Head against elevation at one multi-zone well, over the unit intervals there.

    Parameters
    ----------
    stem : path-like
        Output path without suffix; ``<stem>.png`` and ``<stem>.svg`` are written.
    well_id : str
        The well, used in the title (and to select rows of frames that carry a
        ``well_id`` column).
    zones : DataFrame
        zone_id, unit, head, top_elev, bottom_elev, mid_elev; one row per zone.
        Rows without a finite head are left out.
    units_at_well : DataFrame
        unit, role ('aquifer', 'aquitard', 'confining' or 'other'; anything else
        is drawn as 'other'), top_elev, bottom_elev. May be empty.
    pairs : DataFrame or None
        upper_zone, lower_zone, dhead, aquitards (comma-separated unit codes or
        None/NaN), leakage_flux (float or NaN), leakage_unit. Pairs with an
        aquitard get a "Δh = ... across ..." annotation (and the leakage flux
        when it is finite). None or empty: no annotations.
    length_unit : str
        Unit of heads and elevations, for the labels.

    Returns
    -------
    list of Path
        The PNG and SVG written.

    Raises
    ------
    ParameterError
        Missing columns, no zone with a head, or a pair naming a zone not in ``zones``.
    """
    zcols = ["zone_id", "unit", "head", "top_elev", "bottom_elev", "mid_elev"]
    z = _for_well(_require_columns(zones, zcols, "zones"), well_id)
    z = z[np.isfinite(pd.to_numeric(z["head"], errors="coerce"))]
    if z.empty:
        raise ParameterError(f"head_profile: well {well_id!r} has no zone with a head; zones needs at least one row")
    z = z.sort_values("mid_elev", ascending=False)
    u = _for_well(_require_columns(units_at_well, ["unit", "role", "top_elev", "bottom_elev"], "units_at_well"),
                  well_id)
    p = pd.DataFrame(columns=["upper_zone", "lower_zone", "dhead", "aquitards", "leakage_flux", "leakage_unit"])
    if pairs is not None:
        p = _for_well(_require_columns(pairs, ["upper_zone", "lower_zone", "dhead", "aquitards"], "pairs"), well_id)
        p = p[[not _is_missing(a) for a in p["aquitards"]]]
    where = {zid: row for zid, row in zip(z["zone_id"], z.itertuples(index=False))}
    unknown = sorted({str(x) for x in pd.concat([p["upper_zone"], p["lower_zone"]]) if x not in where})
    if unknown:
        raise ParameterError(f"head_profile: pairs name zone(s) {', '.join(unknown)} that are not in zones "
                             f"of well {well_id!r}")

    def draw(fig, ax):
        heads = z["head"].to_numpy(float)
        span = max(float(np.ptp(heads)), 1.0)
        ax.set_xlim(heads.min() - 0.35 * span, heads.max() + 1.1 * span)
        roles = []
        for r in u.itertuples(index=False):
            role = r.role if r.role in ROLE_STYLE else "other"
            colour, alpha, hatch, _ = ROLE_STYLE[role]
            ax.axhspan(r.bottom_elev, r.top_elev, facecolor=colour, alpha=alpha, hatch=hatch,
                       edgecolor="#555555", linewidth=0.4, zorder=0)
            ax.text(0.01, (r.top_elev + r.bottom_elev) / 2, str(r.unit), transform=ax.get_yaxis_transform(),
                    ha="left", va="center", fontsize=8, fontweight="bold", color="#333333")
            roles.append(role)
        mids = z["mid_elev"].to_numpy(float)
        yerr = [mids - z["bottom_elev"].to_numpy(float), z["top_elev"].to_numpy(float) - mids]
        ax.plot(heads, mids, color=BLUE, linewidth=1.2, zorder=3)
        ax.errorbar(heads, mids, yerr=yerr, fmt="o", color=BLUE, markersize=6, capsize=4, elinewidth=2,
                    zorder=4, label="zone head (bar: screened interval)")
        for r in z.itertuples(index=False):
            ax.annotate(str(r.zone_id), (r.head, r.mid_elev), xytext=(6, 4), textcoords="offset points",
                        fontsize=7, color=BLUE)
        for r in p.itertuples(index=False):
            up, lo = where[r.upper_zone], where[r.lower_zone]
            y = (up.mid_elev + lo.mid_elev) / 2
            ax.annotate("", xy=(up.head, y), xytext=(lo.head, y),
                        arrowprops={"arrowstyle": "<->", "color": VERMILLION, "linewidth": 1.2})
            text = f"Δh = {r.dhead:.1f} {length_unit} across {str(r.aquitards).replace(',', ', ')}"
            flux = getattr(r, "leakage_flux", float("nan"))
            if flux is not None and np.isfinite(flux):
                sense = "downward" if flux > 0 else "upward"
                text += f"\nleakage ≈ {abs(flux):.2g} {getattr(r, 'leakage_unit', '')} {sense}"
            ax.text(max(up.head, lo.head) + 0.05 * span, y, text, ha="left", va="center", fontsize=8,
                    color=VERMILLION, bbox={"boxstyle": "round,pad=0.25", "facecolor": "white", "alpha": 0.85,
                                            "edgecolor": VERMILLION, "linewidth": 0.6})
        handles = [ax.get_legend_handles_labels()[0][0]]
        for role in dict.fromkeys(roles):
            colour, alpha, hatch, label = ROLE_STYLE[role]
            handles.append(Patch(facecolor=colour, alpha=alpha, hatch=hatch, edgecolor="#555555", label=label))
        ax.legend(handles=handles, loc="lower right", fontsize=7, framealpha=0.9)
        ax.set_xlabel(f"Hydraulic head ({length_unit})")
        ax.set_ylabel(f"Elevation ({length_unit})")
        ax.set_title(f"Head profile at well {well_id}")
        ax.grid(True, axis="x", color="#DDDDDD", linewidth=0.6, zorder=1)

    return _render(stem, draw, figsize=(7.0, 6.0))


def logk_distribution(stem, values, stats, *, k_unit="m/d") -> list[Path]:
    """Distribution of log10 K per unit: jittered tests, a box per unit, geometric mean and its 95 % CI.

    Parameters
    ----------
    stem : path-like
        Output path without suffix.
    values : DataFrame
        unit, log10k (log10 of K in ``k_unit``), one row per test. Non-finite
        values are left out.
    stats : list of dict
        unit, k_geomean (in ``k_unit``, or None), k_geomean_ci95 (two numbers
        or None), n_tests. Units are drawn in the order of ``stats``, then any
        other unit of ``values`` in order of first appearance.
    k_unit : str
        Unit of K, for the axis label.

    Returns
    -------
    list of Path
        The PNG and SVG written.

    Raises
    ------
    ParameterError
        Missing columns, nothing to draw, or a non-positive geometric mean or CI bound.
    """
    v = _require_columns(values, ["unit", "log10k"], "values")
    v = v.assign(log10k=pd.to_numeric(v["log10k"], errors="coerce"))
    v = v[np.isfinite(v["log10k"])]
    stats = list(stats or [])
    by_unit = {s["unit"]: s for s in stats}
    order = list(dict.fromkeys([s["unit"] for s in stats] + list(v["unit"])))
    if not order:
        raise ParameterError("logk_distribution: no units to draw; values and stats are both empty")
    for s in stats:
        bounds = [s.get("k_geomean")] + list(s.get("k_geomean_ci95") or [])
        # a unit with one test has no interval (NaN bounds): nothing to draw, not an error
        if any(b is not None and math.isfinite(b) and not b > 0 for b in bounds):
            raise ParameterError(f"logk_distribution: unit {s['unit']!r} has a non-positive geometric mean or "
                                 f"CI bound; K must be > 0 to take log10")

    def draw(fig, ax):
        rng = np.random.default_rng(20240)
        x = np.arange(len(order), dtype=float)
        groups = [v.loc[v["unit"] == unit, "log10k"].to_numpy(float) for unit in order]
        filled = [i for i, g in enumerate(groups) if len(g)]
        if filled:
            ax.boxplot([groups[i] for i in filled], positions=x[filled], widths=0.5, patch_artist=True,
                       showfliers=False, zorder=2, medianprops={"color": BLACK, "linewidth": 1.5},
                       boxprops={"facecolor": SKY, "alpha": 0.35, "edgecolor": "#333333"},
                       whiskerprops={"color": "#333333"}, capprops={"color": "#333333"})
        for i, g in enumerate(groups):
            ax.scatter(x[i] + rng.uniform(-0.16, 0.16, len(g)), g, s=14, color=BLUE, alpha=0.7,
                       edgecolors="none", zorder=3)
        gm_label, ci_label = "geometric mean", "95 % CI of the geometric mean"
        for i, unit in enumerate(order):
            s = by_unit.get(unit, {})
            ci = s.get("k_geomean_ci95")
            if ci is not None and all(c is not None and math.isfinite(c) for c in ci):
                ax.plot([x[i] + 0.34] * 2, np.log10(ci), color=VERMILLION, linewidth=2.5, solid_capstyle="butt",
                        zorder=4, label=ci_label)
                ci_label = None
            if s.get("k_geomean") is not None and math.isfinite(s["k_geomean"]):
                ax.plot(x[i] + 0.34, math.log10(s["k_geomean"]), marker="D", markersize=7, color=VERMILLION,
                        markeredgecolor=BLACK, linestyle="none", zorder=5, label=gm_label)
                gm_label = None
        n = [by_unit.get(unit, {}).get("n_tests", len(groups[i])) for i, unit in enumerate(order)]
        ax.set_xticks(x, [f"{unit}\nn = {k}" for unit, k in zip(order, n)])
        ax.set_xlim(-0.6, len(order) - 0.4)
        lo, hi = ax.get_ylim()
        if hi - lo < 1.0:  # show at least one log cycle
            ax.set_ylim((lo + hi) / 2 - 0.5, (lo + hi) / 2 + 0.5)
        ax.scatter([], [], s=14, color=BLUE, alpha=0.7, label="single test (jittered)")
        handles = ax.get_legend_handles_labels()[0] + [
            Patch(facecolor=SKY, alpha=0.35, edgecolor="#333333", label="box: quartiles, median; whiskers 1.5 IQR")]
        ax.legend(handles=handles, loc="best", fontsize=7, framealpha=0.9)
        ax.set_xlabel("Hydrostratigraphic unit")
        ax.set_ylabel(f"log10 K (K in {k_unit})")
        ax.set_title("Hydraulic conductivity by unit")
        ax.grid(True, axis="y", color="#DDDDDD", linewidth=0.6, zorder=0)

    return _render(stem, draw, figsize=(max(5.0, 1.1 * len(order) + 2.5), 5.0))


def _squared(unit: str) -> str:
    """Unit of a semivariance from that of the values: 'ft' -> 'ft²'; 'log10(ft/d)' -> '(log10 K)², K in ft/d'."""
    unit = str(unit or "").strip()
    if not unit:
        return ""
    if unit.startswith("log10(") and unit.endswith(")"):
        return f"(log10 K)², K in {unit[6:-1]}"
    return f"{unit}²" if unit.isalnum() else f"({unit})²"


def variogram_fit(stem, experimental, model_params, *, title="", distance_unit="", value_unit="") -> list[Path]:
    """Experimental semivariances and the fitted variogram model.

    Parameters
    ----------
    stem : path-like
        Output path without suffix.
    experimental : dict
        lags, gamma, counts (equal-length lists; lags in ``distance_unit``),
        optional max_lag. Marker area grows with the pair count.
    model_params : dict
        model ('spherical', 'exponential' or 'gaussian'), nugget, sill (total),
        range (practical). The curve is drawn from 0 to the largest lag (or
        max_lag), with gamma(0) = 0 and the nugget as the jump just after 0.
    title : str
        Figure title (default "Variogram").
    distance_unit : str
        Unit of lags and range: the CRS's linear unit, e.g. 'm', 'ft' or 'ftUS' (the label says
        "CRS units" when not given).
    value_unit : str
        Unit of the values, e.g. 'ft' for heads or 'log10(ft/d)' for log K; semivariance, nugget and
        sill are in its square.

    Returns
    -------
    list of Path
        The PNG and SVG written.

    Raises
    ------
    ParameterError
        Missing keys, empty or unequal lists, an unknown model or a non-positive range.
    """
    from ..interp.variogram import MODELS, gamma_values

    missing = [k for k in ("lags", "gamma", "counts") if k not in experimental]
    missing += [k for k in ("model", "nugget", "sill", "range") if k not in model_params]
    if missing:
        raise ParameterError(f"variogram_fit: missing {', '.join(missing)} (experimental needs lags, gamma, "
                             f"counts; model_params needs model, nugget, sill, range)")
    lags, gam, counts = (_as_float_array(experimental[k], k) for k in ("lags", "gamma", "counts"))
    if not len(lags) or not len(lags) == len(gam) == len(counts):
        raise ParameterError(f"variogram_fit: lags, gamma and counts must be non-empty and of equal length; "
                             f"got {len(lags)}, {len(gam)}, {len(counts)}")
    model = model_params["model"]
    nugget, sill, rng = (float(model_params[k]) for k in ("nugget", "sill", "range"))
    if model not in MODELS:
        raise ParameterError(f"variogram_fit: unknown model {model!r}; expected one of {', '.join(MODELS)}")
    if not rng > 0:
        raise ParameterError(f"variogram_fit: range must be > 0; got {rng}")

    dist = str(distance_unit or "").strip() or "CRS units"
    sq = _squared(value_unit)
    sq_suffix = f" {sq}" if sq and not sq.startswith("(log10") else (f" ({sq})" if sq else "")

    def draw(fig, ax):
        hmax = float(experimental.get("max_lag") or np.nanmax(lags))
        h = np.concatenate([[0.0], np.linspace(hmax * 1e-6, hmax, 400)])
        size = 20 + 180 * counts / max(float(np.nanmax(counts)), 1.0)
        ax.scatter(lags, gam, s=size, color=BLUE, alpha=0.8, edgecolors=BLACK, linewidths=0.5, zorder=3,
                   label=f"experimental (marker area ∝ pairs, max {int(np.nanmax(counts))})")
        curve, = ax.plot(h, gamma_values(h, model, nugget, sill, rng), color=VERMILLION, linewidth=2, zorder=4,
                         label=f"{model} model")
        curve.set_gid("variogram-model")
        ax.axhline(sill, color="#555555", linestyle="--", linewidth=0.9, zorder=1,
                   label=f"sill = {sill:.4g}{sq_suffix}")
        ax.axhline(nugget, color="#555555", linestyle=":", linewidth=1.1, zorder=1,
                   label=f"nugget = {nugget:.4g}{sq_suffix}")
        beyond = "" if rng <= hmax else " (beyond the largest lag)"
        ax.axvline(min(rng, hmax), color=GREEN, linestyle="--" if not beyond else "none", linewidth=0.9,
                   zorder=1, label=f"practical range = {rng:.4g} {dist}{beyond}")
        ax.set_xlim(0, hmax * 1.03)
        ax.set_ylim(0, max(float(np.nanmax(gam)), sill) * 1.15)
        ax.legend(loc="best", fontsize=7, framealpha=0.9)
        ax.set_xlabel(f"Lag distance ({dist})")
        ax.set_ylabel(f"Semivariance γ(h) ({sq})" if sq else "Semivariance γ(h)")
        ax.set_title(title or "Variogram")
        ax.grid(True, color="#EEEEEE", linewidth=0.6, zorder=0)

    return _render(stem, draw, figsize=(6.5, 4.5))


def cross_validation(stem, observed, estimated, *, std=None, label="", unit="") -> list[Path]:
    """Cross-validation estimates against observed values, with the 1:1 line, RMSE and mean error.

    Parameters
    ----------
    stem : path-like
        Output path without suffix.
    observed, estimated : array-like
        Values and their (e.g. leave-one-out) estimates, equal length. Pairs
        where either is not finite are left out of the plot and the scores.
    std : array-like, optional
        Standard deviation of each estimate (e.g. the kriging standard
        deviation), drawn as ±1 std error bars.
    label : str
        What the values are, e.g. "head, unit ULS"; used in the title and axis labels.
    unit : str
        Unit of the values, for the labels and scores.

    Returns
    -------
    list of Path
        The PNG and SVG written.

    Raises
    ------
    ParameterError
        Unequal lengths, no finite pair, or a negative std.
    """
    obs, est = _as_float_array(observed, "observed"), _as_float_array(estimated, "estimated")
    if len(obs) != len(est):
        raise ParameterError(f"cross_validation: observed and estimated differ in length ({len(obs)} vs {len(est)})")
    sd = None
    if std is not None:
        sd = _as_float_array(std, "std")
        if len(sd) != len(obs):
            raise ParameterError(f"cross_validation: std has {len(sd)} values for {len(obs)} observations")
        if np.any(sd < 0):
            raise ParameterError("cross_validation: std must be >= 0")
    ok = np.isfinite(obs) & np.isfinite(est)
    if not ok.any():
        raise ParameterError("cross_validation: no pair of finite observed and estimated values")
    obs, est, sd = obs[ok], est[ok], (sd[ok] if sd is not None else None)
    err = est - obs
    rmse, me = float(np.sqrt(np.mean(err**2))), float(np.mean(err))

    def draw(fig, ax):
        u = f" {unit}" if unit else ""
        bar = sd if sd is not None else np.zeros_like(est)
        lo = float(np.nanmin(np.concatenate([obs, est - bar])))
        hi = float(np.nanmax(np.concatenate([obs, est + bar])))
        pad = 0.05 * (hi - lo) if hi > lo else 1.0
        lim = (lo - pad, hi + pad)
        ax.plot(lim, lim, color=BLACK, linestyle="--", linewidth=1, zorder=1, label="1:1 line")
        if sd is not None:
            ax.errorbar(obs, est, yerr=sd, fmt="none", ecolor=SKY, elinewidth=1.2, capsize=2, zorder=2,
                        label="±1 std of the estimate")
        ax.scatter(obs, est, s=22, color=BLUE, edgecolors=BLACK, linewidths=0.4, zorder=3, label="point")
        ax.text(0.03, 0.97, f"n = {len(obs)}\nRMSE = {rmse:.3g}{u}\nmean error (est − obs) = {me:.3g}{u}",
                transform=ax.transAxes, ha="left", va="top", fontsize=8,
                bbox={"boxstyle": "round,pad=0.35", "facecolor": "white", "edgecolor": "#999999"})
        ax.set_xlim(lim)
        ax.set_ylim(lim)
        ax.set_aspect("equal")
        ax.legend(loc="lower right", fontsize=7, framealpha=0.9)
        what = f" {label}" if label else ""
        paren = f" ({unit})" if unit else ""
        ax.set_xlabel(f"Observed{what}{paren}")
        ax.set_ylabel(f"Estimated{what}{paren}")
        ax.set_title(f"Cross-validation{': ' + label if label else ''}")
        ax.grid(True, color="#EEEEEE", linewidth=0.6, zorder=0)

    return _render(stem, draw, figsize=(5.5, 5.5))


#: time axis of each slug-test method: log-linear (log H/H0) for the exponential recoveries, log time for the
#: type-curve method, linear for oscillating responses
SLUG_AXES = {"hvorslev": "log-head", "bouwer-rice": "log-head", "cbp": "log-time", "oscillating": "linear"}


def slug_test(stem, repeats, *, method=None, fitted=None, t_window=None, title="", subtitle="",
              disagree=False) -> list[Path]:
    """Normalised head H/H0 against time for one slug test, with the zone's repeats overlaid.

    Log-linear (log H/H0 against t) for Hvorslev and Bouwer-Rice, H/H0 against log t for Cooper, Bredehoeft
    and Papadopulos, linear for oscillating responses (and when no method applies).

    Parameters
    ----------
    stem : path-like
        Output path without suffix.
    repeats : list of dict
        One per record of the zone: ``t`` (s), ``h`` (H/H0), ``label``, and ``current`` (True for the test
        the figure is about; the others are drawn lighter).
    method : str, optional
        Method key of the fit ('hvorslev', 'bouwer-rice', 'cbp', 'oscillating'), None when there is no K.
    fitted : (t, h) arrays, optional
        The fitted line or curve in H/H0.
    t_window : (t_from, t_to), optional
        Time span of the fit window, shaded.
    title, subtitle : str
        Title lines; the subtitle carries K with its unit and method.
    disagree : bool
        The repeats of the zone disagree beyond the tolerance; said on the figure.

    Returns
    -------
    list of Path
        The PNG and SVG written.
    """
    if not repeats:
        raise ParameterError("slug_test: no record to draw")
    axes = SLUG_AXES.get(method, "linear")
    series = []
    for r in repeats:
        t, h = _as_float_array(r["t"], "t"), _as_float_array(r["h"], "h")
        if len(t) != len(h):
            raise ParameterError(f"slug_test: t and h of {r.get('label')} differ in length")
        keep = np.isfinite(t) & np.isfinite(h)
        if axes == "log-head":
            keep &= h > 0
        if axes == "log-time":
            keep &= t > 0
        series.append((t[keep], h[keep], str(r.get("label", "")), bool(r.get("current"))))
    palette = [BLUE, ORANGE, GREEN, PURPLE, SKY, YELLOW]

    def draw(fig, ax):
        others = 0
        for t, h, label, current in series:
            if current:
                ax.plot(t, h, "o", markersize=3.2, color=BLACK, label=f"{label}, this test", zorder=3)
            else:
                ax.plot(t, h, "o", markersize=2.4, alpha=0.55, color=palette[others % len(palette)],
                        label=f"{label}, repeat", zorder=2)
                others += 1
        if t_window is not None and len(t_window) == 2 and all(np.isfinite(np.asarray(t_window, float))):
            ax.axvspan(float(t_window[0]), float(t_window[1]), color=YELLOW, alpha=0.35, zorder=1,
                       label="fit window")
        if fitted is not None:
            tf, hf = _as_float_array(fitted[0], "t_fit"), _as_float_array(fitted[1], "h_fit")
            ok = np.isfinite(tf) & np.isfinite(hf) & ((hf > 0) if axes == "log-head" else True)
            ax.plot(tf[ok], hf[ok], "-", color=VERMILLION, linewidth=1.6, zorder=4, label="fitted")
        plain = matplotlib.ticker.FuncFormatter(lambda v, _: f"{v:g}")  # no mathtext: parse_math is off
        if axes == "log-head":
            ax.set_yscale("log")
            ax.yaxis.set_major_formatter(plain)
            ax.yaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
        elif axes == "log-time":
            ax.set_xscale("log")
            ax.xaxis.set_major_formatter(plain)
            ax.xaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
        else:
            ax.axhline(0.0, color="#999999", linewidth=0.7, zorder=0)
        ax.set_xlabel("Time since the start of the test (s)" + (", log scale" if axes == "log-time" else ""))
        ax.set_ylabel("Normalised head H/H0 (-)" + (", log scale" if axes == "log-head" else ""))
        head = title + (f"\n{subtitle}" if subtitle else "")
        if disagree:
            head += "\nrepeats of this zone disagree beyond the tolerance"
        ax.set_title(head, fontsize=9)
        ax.legend(loc="best", fontsize=7, framealpha=0.9)
        ax.grid(True, which="both", color="#EEEEEE", linewidth=0.6, zorder=0)

    return _render(stem, draw, figsize=(6.5, 4.8))
