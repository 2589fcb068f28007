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
from dataclasses import dataclass
from pathlib import Path

import matplotlib
import matplotlib.ticker
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from ..cautions import FIGURE_FOOTER as FOOTER
from ..errors import ParameterError
from .names import atomic_path

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


def spring_discharge(stem, heads, discharge_paired, *, curve=None, h0=None, h0_band=None, levels=(), times=None,
                     discharge=None, recession=(), title="", subtitle="", length_unit="m",
                     rate_unit="m3/d") -> list[Path]:
    """A spring's discharge against an index head (with the fit, the cease-flow band and the trigger levels) beside
    its discharge record against time (with the recession fits, log scale).

    Parameters
    ----------
    stem : path-like
        Output path without suffix.
    heads, discharge_paired : array-like, shape (n,)
        The paired heads (``length_unit``) and discharges (``rate_unit``).
    curve : (h, q) arrays, optional
        The fitted relation.
    h0 : float, optional
        Cease-flow head; ``h0_band`` its interval (low, high).
    levels : sequence of (percent, head, low, high)
        Trigger levels drawn as vertical lines with their intervals.
    times, discharge : array-like, optional
        The whole discharge record (datetime64 and ``rate_unit``) for the right panel.
    recession : sequence of (times, q)
        Fitted recession curves, one per segment.

    Returns
    -------
    list of Path
        The PNG and SVG written.
    """
    h, q = _as_float_array(heads, "heads"), _as_float_array(discharge_paired, "discharge_paired")
    if len(h) != len(q):
        raise ParameterError(f"spring_discharge: heads and discharge differ in length ({len(h)} vs {len(q)})")
    with matplotlib.rc_context(_RC):
        fig = Figure(figsize=(11.0, 4.8), layout="constrained")
        FigureCanvasAgg(fig)
        fig.get_layout_engine().set(rect=(0, 0.035, 1, 0.965))
        ax, ax2 = fig.subplots(1, 2, width_ratios=(1.15, 1.0))
        if h0_band is not None and all(np.isfinite(np.asarray(h0_band, float))):
            ax.axvspan(float(h0_band[0]), float(h0_band[1]), color=VERMILLION, alpha=0.15, zorder=0,
                       label="cease-flow head, 95 % interval")
        if h0 is not None and np.isfinite(h0):
            ax.axvline(float(h0), color=VERMILLION, linewidth=1.2, zorder=2,
                       label=f"cease-flow head {h0:.4g} {length_unit}")
        styles = ("--", ":", "-.")
        for i, (pct, lh, lo, hi) in enumerate(levels):
            if np.isfinite(lh):
                ax.axvline(lh, color=PURPLE, linestyle=styles[i % len(styles)], linewidth=1.0, zorder=2,
                           label=f"{pct:g} % trigger: {lh:.4g} {length_unit} ({lo:.4g} to {hi:.4g})")
        ax.scatter(h, q, s=18, color=BLUE, edgecolors=BLACK, linewidths=0.4, zorder=3, label="paired reading")
        if curve is not None:
            ch, cq = _as_float_array(curve[0], "curve h"), _as_float_array(curve[1], "curve q")
            ax.plot(ch, cq, color=BLACK, linewidth=1.4, zorder=4, label="fitted relation")
        ax.set_ylim(bottom=0)
        ax.set_xlabel(f"Head at the index zone ({length_unit})")
        ax.set_ylabel(f"Discharge ({rate_unit})")
        ax.set_title(title + (f"\n{subtitle}" if subtitle else ""), fontsize=9)
        ax.legend(loc="upper left", fontsize=6.5, framealpha=0.9)
        ax.grid(True, color="#EEEEEE", linewidth=0.6, zorder=0)
        if times is not None and discharge is not None:
            t = np.asarray(times, dtype="datetime64[ns]")
            qq = _as_float_array(discharge, "discharge")
            ok = qq > 0
            ax2.plot(t[ok], qq[ok], "o-", color="#777777", markersize=2.5, linewidth=0.7, zorder=2,
                     label="discharge reading")
            for k, (tt, qf) in enumerate(recession):
                ax2.plot(np.asarray(tt, dtype="datetime64[ns]"), _as_float_array(qf, "recession q"), "-",
                         color=VERMILLION, linewidth=1.8, zorder=3,
                         label="Maillet recession fit" if k == 0 else None)
            if ok.any():
                ax2.set_yscale("log")
                plain = matplotlib.ticker.FuncFormatter(lambda v, _: f"{v:g}")
                ax2.yaxis.set_major_formatter(plain)
                ax2.yaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
            import matplotlib.dates as mdates

            locator = mdates.AutoDateLocator(minticks=4, maxticks=8)
            ax2.xaxis.set_major_locator(locator)
            ax2.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, show_offset=False))
            ax2.set_xlabel("Date")
            ax2.set_ylabel(f"Discharge ({rate_unit}), log scale")
            ax2.set_title("Discharge record and recession", fontsize=9)
            ax2.legend(loc="best", fontsize=6.5, framealpha=0.9)
            ax2.grid(True, which="both", color="#EEEEEE", linewidth=0.6, zorder=0)
        else:
            ax2.set_axis_off()
        fig.text(0.01, 0.01, FOOTER, fontsize=7, color="#555555", ha="left", va="bottom")
        return _write(fig, stem)


# -- hydrographs: head and spring discharge against time (issue 14) -------------------------------------------
#: line colours of units in hydrographs, taken in the store's rank order so a unit keeps its colour in every
#: figure (Okabe-Ito, without yellow, which is too pale for a line on white)
UNIT_LINE_COLOURS = (BLUE, VERMILLION, GREEN, ORANGE, PURPLE, SKY, BLACK, "#999999")
#: colour of a zone without a unit
NO_UNIT_COLOUR = "#777777"
_MARKERS = ("o", "s", "^", "D", "v", "P", "X")
_LINESTYLES = ("-", "--", ":", "-.")
#: fills of shaded windows (greys, told apart by hatching, so they never read as a unit's line colour): the
#: window and the baseline of the command line, then any other named window
_SHADE_FILLS = {"window": ("#8C8C8C", 0.25, "//"), "baseline": ("#BDBDBD", 0.30, None)}
_OTHER_FILLS = (("#A0A0A0", 0.22, "\\\\"), ("#A0A0A0", 0.22, ".."), ("#A0A0A0", 0.22, "xx"), ("#A0A0A0", 0.22, "||"))


def unit_colours(codes) -> dict:
    """A line colour for each unit code, by its position in ``codes`` (the store's units in rank order).

    Positions past the palette start it again (zones of one well are also told apart by marker and line style).

    >>> unit_colours(["UA", "UB"])["UB"]
    '#D55E00'
    """
    return {code: UNIT_LINE_COLOURS[i % len(UNIT_LINE_COLOURS)] for i, code in enumerate(dict.fromkeys(codes))}


def _shade_windows(ax, shades) -> None:
    """Shade each (label, start, end) window across the axis, with a legend entry naming it and its dates."""
    others = 0
    for label, start, end in shades or ():
        fill = _SHADE_FILLS.get(str(label))
        if fill is None:
            fill = _OTHER_FILLS[others % len(_OTHER_FILLS)]
            others += 1
        colour, alpha, hatch = fill
        start, end = pd.Timestamp(start), pd.Timestamp(end)
        ax.axvspan(start, end, facecolor=colour, alpha=alpha, hatch=hatch, edgecolor=colour, linewidth=0.6,
                   zorder=0, label=f"{label}: {start.date().isoformat()} to {end.date().isoformat()}")


def _time_axis(ax) -> None:
    import matplotlib.dates as mdates

    locator = mdates.AutoDateLocator(minticks=4, maxticks=10)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, show_offset=False))
    ax.set_xlabel("Date")
    ax.grid(True, color="#EEEEEE", linewidth=0.6, zorder=0)


def _times(values, name: str) -> np.ndarray:
    try:
        t = pd.to_datetime(pd.Series(values), format="ISO8601", utc=True).dt.tz_convert(None)
    except (ValueError, TypeError) as exc:
        raise ParameterError(f"{name} must be ISO 8601 dates: {exc}") from None
    return t.to_numpy()


def head_hydrograph(stem, well_id, readings, *, colours, length_unit="m", vertical_datum="unspecified",
                    shades=()) -> list[Path]:
    """Head against time of every zone of one well, coloured by unit, with windows shaded.

    Parameters
    ----------
    stem : path-like
        Output path without suffix; ``<stem>.png`` and ``<stem>.svg`` are written.
    well_id : str
        The well, used in the title (and to select rows when ``readings`` has a well_id column).
    readings : DataFrame
        zone_id, unit (code or None), measured_at (ISO 8601), head (``length_unit``); one row per reading.
        Every row is drawn (rows without a finite head are refused, not dropped: the figure shows exactly
        the rows given).
    colours : dict
        Unit code -> line colour (:func:`unit_colours`); a unit not in it, or no unit, is drawn grey.
    length_unit : str
        Unit of heads, for the axis label.
    vertical_datum : str
        Label of the datum heads are measured above, for the axis label.
    shades : sequence of (label, start, end)
        Windows to shade (``start``/``end`` dates); the labels 'window' and 'baseline' get fixed fills.

    Returns
    -------
    list of Path
        The PNG and SVG written.

    Raises
    ------
    ParameterError
        Missing columns, no reading, or a head that is not a finite number.
    """
    r = _for_well(_require_columns(readings, ["zone_id", "unit", "measured_at", "head"], "readings"), well_id)
    if r.empty:
        raise ParameterError(f"head_hydrograph: well {well_id!r} has no reading to draw")
    heads = pd.to_numeric(r["head"], errors="coerce").to_numpy(float)
    if not np.isfinite(heads).all():
        raise ParameterError(f"head_hydrograph: well {well_id!r} has readings without a finite head")
    t = _times(r["measured_at"], "measured_at")
    datum = str(vertical_datum or "").strip()
    above = "an unspecified datum" if datum.lower() in ("", "unspecified") else datum
    zone = r["zone_id"].astype(str).to_numpy()
    unit = np.array([None if _is_missing(u) else str(u) for u in r["unit"]], dtype=object)

    def draw(fig, ax):
        _shade_windows(ax, shades)
        per_unit: dict = {}
        for zid in dict.fromkeys(zone):  # in the order given (the caller sorts zones top down)
            sel = zone == zid
            code = unit[sel][0]
            k = per_unit.get(code, 0)
            per_unit[code] = k + 1
            order = np.argsort(t[sel], kind="stable")
            colour = colours.get(code, NO_UNIT_COLOUR) if code is not None else NO_UNIT_COLOUR
            ax.plot(t[sel][order], heads[sel][order], color=colour, marker=_MARKERS[k % len(_MARKERS)],
                    linestyle=_LINESTYLES[k % len(_LINESTYLES)], linewidth=1.2, markersize=3.2, zorder=3,
                    label=f"zone {zid}, unit {code if code is not None else '(none)'}")
        _time_axis(ax)
        ax.set_ylabel(f"Hydraulic head ({length_unit} above {above})")
        ax.set_title(f"Hydrograph of well {well_id}")
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7, framealpha=0.9)

    return _render(stem, draw, figsize=(9.5, 4.5))


def discharge_hydrograph(stem, spring_id, readings, *, rate_unit, shades=()) -> list[Path]:
    """Discharge of one spring against time, with windows shaded.

    Parameters
    ----------
    stem : path-like
        Output path without suffix.
    spring_id : str
        The spring, used in the title (and to select rows when ``readings`` has a spring_id column).
    readings : DataFrame
        measured_at (ISO 8601), discharge (``rate_unit``, >= 0); every row is drawn.
    rate_unit : str
        Unit of the discharge, for the axis label.
    shades : sequence of (label, start, end)
        As in :func:`head_hydrograph`.

    Returns
    -------
    list of Path
        The PNG and SVG written.
    """
    r = _require_columns(readings, ["measured_at", "discharge"], "readings")
    if "spring_id" in r.columns:
        r = r[r["spring_id"] == spring_id]
    if r.empty:
        raise ParameterError(f"discharge_hydrograph: spring {spring_id!r} has no reading to draw")
    q = pd.to_numeric(r["discharge"], errors="coerce").to_numpy(float)
    if not (np.isfinite(q).all() and (q >= 0).all()):
        raise ParameterError(f"discharge_hydrograph: spring {spring_id!r} has a discharge that is not a finite "
                             "number >= 0")
    t = _times(r["measured_at"], "measured_at")
    order = np.argsort(t, kind="stable")

    def draw(fig, ax):
        _shade_windows(ax, shades)
        ax.plot(t[order], q[order], color=BLUE, marker="o", linewidth=1.2, markersize=3.2, zorder=3,
                label=f"spring {spring_id}")
        _time_axis(ax)
        ax.set_ylim(bottom=0.0)
        ax.set_ylabel(f"Discharge ({rate_unit})")
        ax.set_title(f"Discharge of spring {spring_id}")
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7, framealpha=0.9)

    return _render(stem, draw, figsize=(9.5, 3.8))


# -- the static map for reports (issue 14, item 5) ----------------------------------------------------------------
# The same layers, symbols and colours as the web map (hydroatlas.export.webmap), drawn in the store's CRS.

@dataclass(frozen=True, eq=False)
class MapContours:
    """Labelled contour lines of a grid: x (ncol,) and y (nrow,) cell centres (CRS units), values (nrow, ncol).

    With ``negative_color``, negative levels (recovery of a drawdown) are drawn in that colour, with their own
    legend entry ``negative_label``. ``fmt`` formats a level for its label (e.g. ``"{:g} ft"``).
    """

    label: str
    x: np.ndarray
    y: np.ndarray
    values: np.ndarray
    levels: tuple
    color: str = "#0b5563"
    negative_color: str | None = None
    negative_label: str = "recovery"
    linestyle: str = "-"
    fmt: str = "{:g}"


@dataclass(frozen=True, eq=False)
class MapAreas:
    """Polygons (shapely, CRS units) drawn with an outline and an optional light fill."""

    label: str
    geometries: tuple
    edgecolor: str
    facecolor: str | None = None
    linestyle: str = "-"
    alpha: float = 0.12


@dataclass(frozen=True, eq=False)
class MapLines:
    """Lines (shapely, CRS units), coloured by ``values`` on ``cmap`` (with a colour bar) or in one ``color``."""

    label: str
    geometries: tuple
    values: np.ndarray | None = None
    cmap: str = "viridis"
    value_label: str = ""
    color: str = "#54278f"


@dataclass(frozen=True, eq=False)
class MapWells:
    """Wells: a circle coloured by log10 K (``k_unit``; NaN: no test, small grey) with a ring by kind."""

    label: str
    x: np.ndarray
    y: np.ndarray
    kinds: tuple
    log10k: np.ndarray
    k_unit: str = "m/d"


@dataclass(frozen=True, eq=False)
class MapPoints:
    """Points with one symbol (matplotlib marker) and optional text labels beside them."""

    label: str
    x: np.ndarray
    y: np.ndarray
    marker: str = "o"
    sizes: tuple = (40,)
    facecolor: str = "#ffffff"
    edgecolor: str = "#1d2b36"
    alpha: float = 1.0
    hatch: str | None = None
    labels: tuple = ()


def _length_step(span: float) -> float:
    """A 1-2-5 step no longer than ``span``."""
    mag = 10 ** math.floor(math.log10(span))
    return max(s * mag for s in (1, 2, 5) if s * mag <= span)


def scale_bar_length(span_m: float, length_unit: str) -> tuple[float, str, float]:
    """A scale bar for a map ``span_m`` metres wide: (length in metres, label, length in the label's unit).

    About a quarter of the width, a 1-2-5 number of feet (miles from 10,000 ft on) in a feet store, of metres
    (kilometres from 1,000 m on) otherwise.

    >>> scale_bar_length(10_000, "m")[1]
    '2 km'
    >>> scale_bar_length(10_000, "ft")[1]
    '5,000 ft'
    """
    if not (span_m > 0 and math.isfinite(span_m)):
        raise ParameterError(f"the map's width must be a positive length; got {span_m}")
    target = span_m / 4
    if length_unit in ("ft", "ft_us"):
        ft = target / 0.3048
        if ft >= 10_000:
            mi = _length_step(ft / 5280)
            return mi * 1609.344, f"{mi:g} mi", mi
        n = _length_step(ft)
        return n * 0.3048, f"{n:,.0f} ft" if n >= 1 else f"{n:g} ft", n
    if target >= 1000:
        km = _length_step(target / 1000)
        return km * 1000, f"{km:g} km", km
    n = _length_step(target)
    return n, f"{n:,.0f} m" if n >= 1 else f"{n:g} m", n


def _polygon_patches(geometries, **style):
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MPath

    patches = []
    for geom in geometries:
        for poly in getattr(geom, "geoms", [geom]):
            if poly.is_empty or poly.geom_type != "Polygon":
                continue
            rings = [np.asarray(poly.exterior.coords)[:, :2]] + [np.asarray(r.coords)[:, :2] for r in poly.interiors]
            verts = np.concatenate(rings)
            codes = np.concatenate([[MPath.MOVETO] + [MPath.LINETO] * (len(r) - 2) + [MPath.CLOSEPOLY]
                                    for r in rings])
            patches.append(PathPatch(MPath(verts, codes), **style))
    return patches


def _log_ticks(lo: float, hi: float) -> list[float]:
    """log10 values of 1-2-5 K values between lo and hi (log10), at least the ends."""
    ticks = [math.log10(m * 10 ** e) for e in range(math.floor(lo) - 1, math.ceil(hi) + 1) for m in (1, 2, 5)]
    ticks = [t for t in ticks if lo - 1e-9 <= t <= hi + 1e-9]
    return ticks if len(ticks) >= 2 else [lo, hi]


def board_map(stem, *, title: str, layers, bounds, length_unit: str = "m", metres_per_crs_unit: float | None = 1.0,
              north_deg: float = 0.0, caution: str = FOOTER, subtitle=(), sections=(),
              formats=("png", "svg", "pdf")) -> list[Path]:
    """A map for reports: the layers drawn in the store's CRS with a title, legend, scale bar and north arrow.

    Parameters
    ----------
    stem : path-like
        Output path without suffix; writes ``<stem>.png`` (150 dpi), ``.svg`` (live text) and ``.pdf``.
    title : str
        The figure's title; ``subtitle`` lines go under it.
    layers : sequence of MapContours, MapAreas, MapLines, MapWells, MapPoints
        Drawn areas first, then contours, lines, wells and points; each gives one legend entry (wells one per
        kind, drawdown contours one for drawdown and one for recovery).
    bounds : (xmin, ymin, xmax, ymax)
        The district in CRS units; the map shows it whole.
    length_unit : str
        The store's length unit: ``ft`` gives a scale bar in feet or miles, else metres or kilometres.
    metres_per_crs_unit : float or None
        Metres per CRS unit of x and y; None for a geographic CRS (degrees: the aspect and the scale bar are
        taken at the middle latitude).
    north_deg : float
        Direction of true north, degrees clockwise from the CRS's grid north (the north arrow turns by it).
    caution : str
        The caution line at the foot (plain text, wrapped).
    sections : sequence of (heading, list of str)
        Text blocks at the top of the right-hand column (head window, pumping scenario, springs).

    Returns
    -------
    list of Path
        The files written, in the order of ``formats``.
    """
    import textwrap

    from matplotlib import colormaps
    from matplotlib.cm import ScalarMappable
    from matplotlib.collections import LineCollection
    from matplotlib.colors import Normalize, to_rgba
    from matplotlib.lines import Line2D
    from matplotlib.offsetbox import AnchoredOffsetbox, DrawingArea
    from matplotlib.patches import Polygon as MPolygon
    from matplotlib.text import Text
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    from .webmap import K_COLORMAP, NO_K_FILL, WELL_KIND_STYLE

    x0, y0, x1, y1 = (float(v) for v in bounds)
    if not (np.isfinite([x0, y0, x1, y1]).all() and x1 > x0 and y1 > y0):
        raise ParameterError(f"board_map: bounds must be finite with xmax > xmin and ymax > ymin; got {bounds}")
    bad = [f for f in formats if f not in ("png", "svg", "pdf")]
    if bad or not formats:
        raise ParameterError(f"board_map: formats must be among png, svg, pdf; got {list(formats)}")
    if metres_per_crs_unit is None:  # degrees: metres per degree of longitude at the middle latitude
        lat = math.radians((y0 + y1) / 2)
        aspect, metres_x = 1.0 / max(math.cos(lat), 1e-6), 111_320.0 * math.cos(lat)
    else:
        aspect, metres_x = 1.0, float(metres_per_crs_unit)
    handles: list = []
    colorbars: list = []

    with matplotlib.rc_context(_RC):
        fig = Figure(figsize=(11.0, 8.5))
        FigureCanvasAgg(fig)
        ax = fig.add_axes((0.03, 0.17, 0.62, 0.68))
        ax.set_gid("map")
        order = {MapAreas: 0, MapContours: 1, MapLines: 2, MapWells: 3, MapPoints: 4}
        for layer in sorted(layers, key=lambda item: order.get(type(item), 5)):
            if isinstance(layer, MapAreas):
                style = dict(edgecolor=layer.edgecolor, linestyle=layer.linestyle, linewidth=1.6, zorder=1,
                             facecolor=(layer.facecolor if layer.facecolor else "none"))
                for patch in _polygon_patches(layer.geometries, **style):
                    patch.set_alpha(None)
                    if layer.facecolor:
                        patch.set_facecolor(to_rgba(layer.facecolor, layer.alpha))
                    ax.add_patch(patch)
                handles.append(Patch(facecolor=to_rgba(layer.facecolor, layer.alpha)
                                     if layer.facecolor else "none", edgecolor=layer.edgecolor,
                                     linestyle=layer.linestyle, label=layer.label))
            elif isinstance(layer, MapContours):
                z = np.ma.masked_invalid(np.asarray(layer.values, float))
                levels = np.asarray(layer.levels, float)
                parts = [(levels[levels >= 0] if layer.negative_color else levels, layer.color, layer.label)]
                if layer.negative_color:
                    parts.append((levels[levels < 0], layer.negative_color, None))
                for lv, color, label in parts:
                    if lv.size == 0 or z.count() == 0:
                        continue
                    cs = ax.contour(layer.x, layer.y, z, levels=np.sort(lv), colors=color, linewidths=1.0,
                                    linestyles=layer.linestyle, zorder=2)
                    ax.clabel(cs, inline=True, fontsize=7, fmt=lambda v, f=layer.fmt: f.format(v))
                handles.append(Line2D([], [], color=layer.color, linestyle=layer.linestyle, label=layer.label))
                if layer.negative_color and (levels < 0).any():
                    handles.append(Line2D([], [], color=layer.negative_color, linestyle=layer.linestyle,
                                          label=layer.negative_label))
            elif isinstance(layer, MapLines):
                segs = [np.asarray(g.coords)[:, :2] for g in layer.geometries if not g.is_empty]
                if layer.values is not None:
                    v = np.asarray(layer.values, float)
                    fin = v[np.isfinite(v)]
                    norm = Normalize(float(fin.min()), float(fin.max()) if fin.size else 1.0) if fin.size else \
                        Normalize(0, 1)
                    coll = LineCollection(segs, cmap=colormaps[layer.cmap], norm=norm, linewidths=1.2, zorder=3)
                    coll.set_array(v)
                    colorbars.append((ScalarMappable(norm=norm, cmap=colormaps[layer.cmap]),
                                      layer.value_label or layer.label, None))
                    color = colormaps[layer.cmap](0.6)
                else:
                    coll = LineCollection(segs, colors=layer.color, linewidths=1.2, zorder=3)
                    color = layer.color
                ax.add_collection(coll)
                handles.append(Line2D([], [], color=color, linewidth=1.5, label=layer.label))
            elif isinstance(layer, MapWells):
                lk = np.asarray(layer.log10k, float)
                fin = lk[np.isfinite(lk)]
                lo, hi = (float(fin.min()), float(fin.max())) if fin.size else (0.0, 1.0)
                if hi <= lo:
                    lo, hi = lo - 0.5, hi + 0.5
                norm, cmap = Normalize(lo, hi), colormaps[K_COLORMAP]
                kinds = np.array([k if k in WELL_KIND_STYLE else "other" for k in layer.kinds])
                for kind in [k for k in WELL_KIND_STYLE if k in set(kinds)]:
                    stroke, width, dash = WELL_KIND_STYLE[kind]
                    ls = "-" if not dash else (0, tuple(float(d) for d in dash.split()))
                    sel = kinds == kind
                    has = sel & np.isfinite(lk)
                    if has.any():
                        ax.scatter(np.asarray(layer.x)[has], np.asarray(layer.y)[has], s=42, c=cmap(norm(lk[has])),
                                   edgecolors=stroke, linewidths=width * 0.75, linestyles=ls, zorder=5)
                    none = sel & ~np.isfinite(lk)
                    if none.any():
                        ax.scatter(np.asarray(layer.x)[none], np.asarray(layer.y)[none], s=16, c=NO_K_FILL,
                                   edgecolors=stroke, linewidths=width * 0.75, linestyles=ls, zorder=5)
                    handles.append(Line2D([], [], linestyle="none", marker="o", markersize=7,
                                          markerfacecolor=cmap(0.5), markeredgecolor=stroke,
                                          markeredgewidth=width * 0.75, label=f"Well, {kind}"))
                if (~np.isfinite(lk)).any():
                    handles.append(Line2D([], [], linestyle="none", marker="o", markersize=4,
                                          markerfacecolor=NO_K_FILL, markeredgecolor="#1d2b36",
                                          label="Well without a K test of the unit"))
                if fin.size:
                    colorbars.append((ScalarMappable(norm=norm, cmap=cmap), layer.label, _log_ticks(lo, hi)))
            elif isinstance(layer, MapPoints):
                xs, ys = np.asarray(layer.x, float), np.asarray(layer.y, float)
                sizes = np.broadcast_to(np.asarray(layer.sizes, float), xs.shape) if len(layer.sizes) in (1, len(xs)) \
                    else np.full(xs.shape, 40.0)
                ax.scatter(xs, ys, s=sizes, marker=layer.marker, facecolors=layer.facecolor,
                           edgecolors=layer.edgecolor, linewidths=1.4, alpha=layer.alpha, hatch=layer.hatch, zorder=6)
                for x, y, text in zip(xs, ys, layer.labels):
                    ax.annotate(str(text), (x, y), xytext=(6, 5), textcoords="offset points", fontsize=7,
                                color="#1d2b36", zorder=7,
                                bbox=dict(boxstyle="round,pad=0.15", facecolor="white", alpha=0.7, linewidth=0))
                handles.append(Line2D([], [], linestyle="none", marker=layer.marker, markersize=8,
                                      markerfacecolor=layer.facecolor, markeredgecolor=layer.edgecolor,
                                      alpha=layer.alpha, label=layer.label))
            else:
                raise ParameterError(f"board_map: unknown layer {type(layer).__name__}")
        # the district whole, grown to the axes' shape so that one data unit is as long in x as in y
        pad = 0.04 * max(x1 - x0, y1 - y0)
        xa, xb, ya, yb = x0 - pad, x1 + pad, y0 - pad, y1 + pad
        box = ax.get_position()
        shape = (box.width * fig.get_figwidth()) / (box.height * fig.get_figheight())  # width / height
        if (xb - xa) / ((yb - ya) * aspect) < shape:
            grow = ((yb - ya) * aspect * shape - (xb - xa)) / 2
            xa, xb = xa - grow, xb + grow
        else:
            grow = ((xb - xa) / (aspect * shape) - (yb - ya)) / 2
            ya, yb = ya - grow, yb + grow
        ax.set_xlim(xa, xb)
        ax.set_ylim(ya, yb)
        ax.set_aspect(aspect, adjustable="box")
        ax.set_xticks([])
        ax.set_yticks([])
        # scale bar (store unit) and north arrow (true north), on white boxes in the map's corners
        xl = ax.get_xlim()
        bar_m, bar_text, _ = scale_bar_length((xl[1] - xl[0]) * metres_x, length_unit)
        yl = ax.get_ylim()
        bar = AnchoredSizeBar(ax.transData, bar_m / metres_x, bar_text, loc="lower left", pad=0.4, borderpad=0.6,
                              sep=3, frameon=True, size_vertical=(yl[1] - yl[0]) * 0.006, color="#1d2b36",
                              fontproperties={"size": 8})
        bar.patch.set_facecolor("white")
        bar.patch.set_alpha(0.85)
        bar.txt_label._text.set_gid("scale-bar")  # the label's text element carries the id in an SVG
        ax.add_artist(bar)
        area = DrawingArea(34, 46, 0, 0)
        theta = math.radians(north_deg)

        def turn(px, py):  # about the arrow's centre (17, 20), clockwise by theta
            dx, dy = px - 17, py - 20
            return (17 + dx * math.cos(theta) + dy * math.sin(theta), 20 - dx * math.sin(theta) + dy * math.cos(theta))

        area.add_artist(MPolygon([turn(17, 34), turn(24, 6), turn(17, 11)], closed=True, facecolor="#1d2b36"))
        area.add_artist(MPolygon([turn(17, 34), turn(10, 6), turn(17, 11)], closed=True, facecolor="white",
                                 edgecolor="#1d2b36", linewidth=0.8))
        tx, ty = turn(17, 40)
        area.add_artist(Text(tx, ty, "N", ha="center", va="center", fontsize=9, fontweight="bold",
                             color="#1d2b36", gid="north-arrow"))
        north = AnchoredOffsetbox(loc="upper left", child=area, pad=0.3, borderpad=0.6, frameon=True)
        north.patch.set_facecolor("white")
        north.patch.set_alpha(0.85)
        ax.add_artist(north)
        # title and the lines under it
        fig.text(0.03, 0.975, title, fontsize=15, fontweight="bold", va="top", ha="left", gid="map-title")
        for i, line in enumerate(subtitle):
            fig.text(0.03, 0.935 - 0.022 * i, line, fontsize=8.5, va="top", ha="left", color="#33414d")
        # right-hand column: the sections, then the legend below them
        renderer = fig.canvas.get_renderer()
        y = 0.845
        for heading, lines in sections:
            head = fig.text(0.67, y, heading, fontsize=8.5, fontweight="bold", va="top", ha="left")
            y -= head.get_window_extent(renderer).height / fig.bbox.height + 0.004
            body = "\n".join(textwrap.fill(str(line), 64, subsequent_indent="  ") for line in lines)
            if body:
                txt = fig.text(0.67, y, body, fontsize=7.2, va="top", ha="left", linespacing=1.25, color="#1d2b36")
                y -= txt.get_window_extent(renderer).height / fig.bbox.height
            y -= 0.012
        for handle in handles:
            handle.set_label(textwrap.fill(handle.get_label(), 46, subsequent_indent="  "))
        legend = fig.legend(handles=handles, loc="upper left", bbox_to_anchor=(0.665, y), fontsize=7.5,
                            frameon=False, title="Legend", title_fontproperties={"size": 8.5, "weight": "bold"},
                            alignment="left", handlelength=2.2)
        legend.set_gid("legend")
        # colour bars under the map
        n = len(colorbars)
        for i, (mappable, label, ticks) in enumerate(colorbars):
            width = 0.62 / max(n, 1) - 0.03
            cax = fig.add_axes((0.03 + i * (width + 0.03), 0.115, width, 0.018))
            cb = fig.colorbar(mappable, cax=cax, orientation="horizontal")
            if ticks is not None:  # K: log10 values shown as K
                cb.set_ticks(ticks)
                cb.set_ticklabels([f"{10 ** t:.3g}" for t in ticks])
            cb.ax.tick_params(labelsize=7)
            cb.set_label(label, fontsize=7.5)
        # the caution line
        fig.text(0.03, 0.012, textwrap.fill(caution, 190), fontsize=7, color="#33414d", va="bottom", ha="left",
                 gid="caution")
        stem = Path(stem)
        written = []
        for fmt in formats:
            path = stem.with_name(f"{stem.name}.{fmt}")
            meta = {"png": {"Software": "hydroatlas"}, "svg": {"Date": None, "Creator": "hydroatlas"},
                    "pdf": {"Creator": "hydroatlas", "CreationDate": None}}[fmt]
            with atomic_path(path) as tmp:
                fig.savefig(tmp, dpi=DPI, metadata=meta, format=fmt)
            written.append(path)
        return written
