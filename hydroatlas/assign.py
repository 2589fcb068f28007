"""Zone-to-unit assignment and inferred unit picks.

Pure functions over DataFrames (no store access): the workflows read the
tables and hand them in. Depths are positive downward from ground surface,
elevations are ``ground_elev - depth``, all in the store's length unit.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .interp import IDW

# Overlaps shorter than this fraction of the zone length do not count as a straddle.
STRADDLE_MIN_FRACTION = 1e-6


def unit_ancestors(units: pd.DataFrame) -> dict[str, list[str]]:
    """Each unit code mapped to its chain of parents, nearest first."""
    parent = dict(zip(units["code"], units["parent"]))
    out = {}
    for code in units["code"]:
        chain, node = [], parent.get(code)
        while isinstance(node, str) and node not in chain:
            chain.append(node)
            node = parent.get(node)
        out[code] = chain
    return out


def unit_members(units: pd.DataFrame, code: str) -> set[str]:
    """The unit ``code`` and all its sub-units; ParameterError naming the known units when ``code`` is not one."""
    from .errors import ParameterError

    if code not in set(units["code"]):
        raise ParameterError(f"unit {code!r} is not in the store; known units: {', '.join(units['code'])}",
                             param="unit")
    return {code} | {c for c, chain in unit_ancestors(units).items() if code in chain}


def finest_picks(picks: pd.DataFrame, units: pd.DataFrame) -> pd.DataFrame:
    """Drop a parent unit's pick in a well where picks of its sub-units exist."""
    if picks.empty or units["parent"].isna().all():
        return picks
    pairs = [(code, anc) for code, chain in unit_ancestors(units).items() for anc in chain]
    if not pairs:
        return picks
    links = pd.DataFrame(pairs, columns=["unit", "ancestor"])
    covered = picks[["well_id", "unit"]].merge(links, on="unit")[["well_id", "ancestor"]].drop_duplicates()
    flag = picks[["well_id", "unit"]].merge(covered, left_on=["well_id", "unit"], right_on=["well_id", "ancestor"],
                                           how="left", indicator=True)["_merge"].eq("both").to_numpy()
    return picks[~flag]


def infer_picks(wells: pd.DataFrame, picks: pd.DataFrame, units: pd.DataFrame, *,
                neighbors: int = 8, power: float = 2.0) -> pd.DataFrame:
    """Unit tops and bottoms at wells without picks, by IDW of neighbouring pick elevations.

    For each unit the top and bottom elevations at wells where it is picked
    are interpolated to the wells without any pick; the result is then made
    stratigraphically consistent (each top at or below the bottom of the unit
    above and at or below ground, each bottom at or below its top). A unit that
    the picks show absent at some wells (see :func:`unit_presence`) is inferred
    only at wells inside its extent (nearer to a well that has it than to one
    that lacks it). Units that come out with zero thickness are left out
    (pinched out).

    Returns
    -------
    DataFrame
        well_id, unit, top_depth, bottom_depth (in the store's length unit).
    """
    cols = ["well_id", "unit", "top_depth", "bottom_depth"]
    if picks.empty or wells.empty:
        return pd.DataFrame(columns=cols)
    picks = finest_picks(picks, units)
    targets = wells[~wells["well_id"].isin(set(picks["well_id"]))]
    if targets.empty:
        return pd.DataFrame(columns=cols)
    geo = picks.merge(wells[["well_id", "x", "y", "ground_elev", "total_depth"]], on="well_id")
    geo["top_elev"] = geo["ground_elev"] - geo["top_depth"]
    geo["bottom_elev"] = geo["ground_elev"] - geo["bottom_depth"]
    # A pick that ends at the well's total depth marks where drilling stopped,
    # not where the unit ends: its bottom does not inform the unit's base.
    geo["bottom_known"] = ~(geo["bottom_depth"] >= geo["total_depth"] - 1e-6)
    txy = targets[["x", "y"]].to_numpy(float)
    ground = targets["ground_elev"].to_numpy(float)
    rank = dict(zip(units["code"], units["rank"]))
    codes = sorted(set(geo["unit"]), key=lambda c: rank.get(c, 0))
    tops, bottoms = [], []
    for code in codes:
        g = geo[geo["unit"] == code]
        gb = g[g["bottom_known"]]
        if gb.empty:  # the base of this unit was never reached: keep every bottom
            gb = g
        tops.append(IDW(power, neighbors=neighbors).fit(g[["x", "y"]].to_numpy(float),
                                                        g["top_elev"].to_numpy(float)).predict(txy))
        bottoms.append(IDW(power, neighbors=neighbors).fit(gb[["x", "y"]].to_numpy(float),
                                                           gb["bottom_elev"].to_numpy(float)).predict(txy))
    ceiling = ground.copy()
    rows = []
    located = wells[["well_id", "x", "y"]]
    for code, top, bottom in zip(codes, tops, bottoms):
        top = np.minimum(top, ceiling)
        bottom = np.minimum(bottom, top)
        if code in rank:  # outside the unit's extent: zero thickness
            bottom = np.where(inside_extent(unit_presence(picks, located, units, code), txy), bottom, top)
        ceiling = bottom
        for wid, g, t, b in zip(targets["well_id"], ground, top, bottom):
            if t - b > 0:
                rows.append((wid, code, max(g - t, 0.0), g - b))
    return pd.DataFrame(rows, columns=cols)


def assign_zones(zones: pd.DataFrame, picks: pd.DataFrame, wells: pd.DataFrame, units: pd.DataFrame, *,
                 infer: bool = True, inferred: pd.DataFrame | None = None) -> pd.DataFrame:
    """Give every zone a unit.

    A zone inside one unit gets it; a zone that crosses units goes to the
    unit with the largest overlap (ties to the upper unit) and is flagged as
    straddling; a ``unit`` override in the zone row wins. Zones in wells
    without picks use :func:`infer_picks` and are flagged ``inferred``
    (``inferred``: its result when the caller has it already, so it is computed once).

    Returns
    -------
    DataFrame
        One row per zone: well_id, zone_id, unit, assigned_by ('picks',
        'inferred', 'override' or 'none'), overlap_fraction (best unit's share
        of the zone length), coverage (share of the zone inside any picked
        unit), straddles, units_crossed, top_elev, bottom_elev, mid_elev,
        thickness, x, y, ground_elev.
    """
    z = zones.merge(wells[["well_id", "x", "y", "ground_elev"]], on="well_id", how="left")
    z["top_elev"] = z["ground_elev"] - z["top_depth"]
    z["bottom_elev"] = z["ground_elev"] - z["bottom_depth"]
    z["mid_elev"] = 0.5 * (z["top_elev"] + z["bottom_elev"])
    z["thickness"] = z["bottom_depth"] - z["top_depth"]
    real = finest_picks(picks[["well_id", "unit", "top_depth", "bottom_depth"]], units).assign(inferred=False)
    all_picks = real
    if infer:
        guessed = (infer_picks(wells, picks, units) if inferred is None else inferred).assign(inferred=True)
        if not guessed.empty:
            all_picks = pd.concat([real, guessed], ignore_index=True)
    rank = dict(zip(units["code"], units["rank"]))
    m = z[["well_id", "zone_id", "top_depth", "bottom_depth", "thickness"]].merge(
        all_picks.rename(columns={"top_depth": "p_top", "bottom_depth": "p_bottom"}), on="well_id", how="inner")
    m["overlap"] = (np.minimum(m["bottom_depth"], m["p_bottom"]) - np.maximum(m["top_depth"], m["p_top"])).clip(lower=0)
    m = m[m["overlap"] > STRADDLE_MIN_FRACTION * m["thickness"]].copy()
    m["rank"] = m["unit"].map(rank)
    m = m.sort_values(["well_id", "zone_id", "overlap", "rank"], ascending=[True, True, False, True])
    grouped = m.groupby(["well_id", "zone_id"], sort=False)
    best = grouped.head(1).set_index(["well_id", "zone_id"])
    summary = pd.DataFrame({
        "picked_unit": best["unit"],
        "overlap_fraction": best["overlap"] / best["thickness"],
        "inferred": best["inferred"],
        "n_units": grouped.size(),
        "coverage": grouped["overlap"].sum() / grouped["thickness"].first(),
    })
    # the list of crossed units is only built for the (few) zones that cross more than one
    multi = m[m.set_index(["well_id", "zone_id"]).index.isin(summary.index[summary["n_units"] > 1])]
    summary["units_crossed"] = summary["picked_unit"]
    if not multi.empty:
        crossed = multi.sort_values("rank").groupby(["well_id", "zone_id"])["unit"].agg(",".join)
        summary.loc[crossed.index, "units_crossed"] = crossed
    out = z.merge(summary, left_on=["well_id", "zone_id"], right_index=True, how="left")
    override = out["unit"].notna() if "unit" in out else pd.Series(False, index=out.index)
    out["override_unit"] = out["unit"] if "unit" in out else None
    out["unit"] = np.where(override, out["override_unit"], out["picked_unit"])
    out["unit"] = out["unit"].where(pd.notna(out["unit"]), None)
    out["assigned_by"] = np.select(
        [override, out["picked_unit"].notna() & (out["inferred"] == True), out["picked_unit"].notna()],  # noqa: E712
        ["override", "inferred", "picks"], default="none")
    out["n_units"] = out["n_units"].fillna(0).astype(int)
    out["straddles"] = out["n_units"] > 1
    out["coverage"] = out["coverage"].fillna(0.0)
    keep = ["well_id", "zone_id", "unit", "assigned_by", "overlap_fraction", "coverage", "straddles",
            "units_crossed", "top_depth", "bottom_depth", "top_elev", "bottom_elev", "mid_elev", "thickness",
            "x", "y", "ground_elev"]
    return out[keep].reset_index(drop=True)


def unit_intervals(wells: pd.DataFrame, picks: pd.DataFrame, units: pd.DataFrame, *,
                   inferred: pd.DataFrame | None = None) -> pd.DataFrame:
    """Elevation interval of every unit at every well: the (finest) picks, plus inferred picks at wells without.

    ``inferred`` is the result of :func:`infer_picks` when the caller has it already (computed when None).

    Returns
    -------
    DataFrame
        well_id, unit, top_elev, bottom_elev (store length unit above the vertical datum).
    """
    real = finest_picks(picks, units)
    guessed = infer_picks(wells, picks, units) if inferred is None else inferred
    allp = pd.concat([real[["well_id", "unit", "top_depth", "bottom_depth"]], guessed], ignore_index=True)
    allp = allp.merge(wells[["well_id", "ground_elev"]], on="well_id")
    allp["top_elev"] = allp["ground_elev"] - allp["top_depth"]
    allp["bottom_elev"] = allp["ground_elev"] - allp["bottom_depth"]
    return allp[["well_id", "unit", "top_elev", "bottom_elev"]]


# -- unit extent from the picks ------------------------------------------------------
# Two picks "touch" when the bottom of one and the top of the next are closer than this
# (store length unit); a pick no thicker than this counts as zero thickness.
EXTENT_TOLERANCE = 0.01


def _unit_family(units: pd.DataFrame, code: str) -> tuple[set[str], set[str]]:
    """The unit and its sub-units (members), and its parents (ancestors)."""
    chains = unit_ancestors(units)
    if code not in chains:
        raise KeyError(code)
    members = {c for c, chain in chains.items() if c == code or code in chain}
    return members, set(chains[code])


def unit_presence(picks: pd.DataFrame, wells: pd.DataFrame, units: pd.DataFrame, code: str, *,
                  tolerance: float = EXTENT_TOLERANCE) -> pd.DataFrame:
    """Whether a unit is present, absent or unknown at each well, from the well's picks.

    Rules (depths positive downward, in the store's length unit):

    - present: the well has a pick of the unit (or of one of its sub-units) thicker than ``tolerance``;
    - absent: the well has a pick of the unit no thicker than ``tolerance``; or the deepest pick of the
      units ranked above it and the shallowest pick of the units ranked below it touch (within
      ``tolerance``), which covers both "the units directly above and below touch" and "a complete log
      through its position lacks it"; the ground surface counts as the top of the log, so a well whose
      first pick is a lower unit starting at depth 0 shows the unit absent;
    - unknown: no picks; no pick below its position (the well is too shallow or not logged that deep);
      an unlogged gap where it could be; or a pick of a parent unit that does not resolve its sub-units.

    Parameters
    ----------
    picks : DataFrame
        well_id, unit, top_depth, bottom_depth.
    wells : DataFrame
        well_id, x, y (every well gets a row).
    units : DataFrame
        code, rank, parent.
    code : str
        The unit.
    tolerance : float
        Largest gap (store length unit) at which two picks still touch.

    Returns
    -------
    DataFrame
        well_id, x, y, present (pandas nullable boolean: True, False or <NA> for unknown), reason.
    """
    if not (isinstance(tolerance, (int, float, np.number)) and np.isfinite(tolerance) and tolerance >= 0):
        raise ValueError(f"tolerance must be a finite number >= 0; got {tolerance}")
    members, ancestors = _unit_family(units, code)
    rank = dict(zip(units["code"], units["rank"]))
    lo = min(rank[c] for c in members)
    hi = max(rank[c] for c in members)
    p = finest_picks(picks[["well_id", "unit", "top_depth", "bottom_depth"]], units)
    p = p[p["unit"].isin(rank.keys())].copy()
    p["rank"] = p["unit"].map(rank)
    p["thickness"] = p["bottom_depth"] - p["top_depth"]
    own = p[p["unit"].isin(members)]
    thick = own.groupby("well_id")["thickness"].max()
    parent = p[p["unit"].isin(ancestors)].drop_duplicates("well_id").set_index("well_id")["unit"]
    others = p[~p["unit"].isin(members | ancestors)]
    up = others[others["rank"] < lo].sort_values("bottom_depth").groupby("well_id").tail(1)
    down = others[others["rank"] > hi].sort_values("top_depth").groupby("well_id").head(1)
    above = dict(zip(up["well_id"], zip(up["unit"], up["bottom_depth"].astype(float))))
    below = dict(zip(down["well_id"], zip(down["unit"], down["top_depth"].astype(float))))
    thick = dict(zip(thick.index, thick.astype(float)))
    parent = dict(zip(parent.index, parent))
    with_picks = set(p["well_id"])
    present, reason = [], []
    for wid in wells["well_id"]:
        if wid in thick:
            t = thick[wid]
            if t > tolerance:
                present.append(True)
                reason.append(f"pick of thickness {t:g}")
            else:
                present.append(False)
                reason.append("pick of zero thickness")
        elif wid not in with_picks:
            present.append(pd.NA)
            reason.append("no picks")
        elif wid in parent:
            present.append(pd.NA)
            reason.append(f"pick of parent unit {parent[wid]} without sub-unit picks")
        elif wid not in below:
            present.append(pd.NA)
            reason.append("no pick below its position (the log ends above it)")
        else:
            b_unit, b_top = below[wid]
            if wid in above:
                a_unit, a_bottom = above[wid]
                gap = b_top - a_bottom
                what = f"picks of {a_unit} above and {b_unit} below"
            else:
                gap = b_top
                what = f"ground and the pick of {b_unit} below"
            if gap <= tolerance:
                present.append(False)
                reason.append(f"{what} touch at depth {b_top:g}")
            else:
                present.append(pd.NA)
                reason.append(f"unlogged gap of {gap:g} between {what}")
    out = wells[["well_id", "x", "y"]].reset_index(drop=True).copy()
    out["present"] = pd.array(present, dtype="boolean")
    out["reason"] = reason
    return out


def _presence_points(presence: pd.DataFrame):
    """Distinct locations of wells with a known presence and whether the unit is there.

    Wells at one location that disagree count as present (their data are kept).
    """
    known = presence[presence["present"].notna()]
    xy = known[["x", "y"]].to_numpy(float)
    flag = known["present"].to_numpy(bool)
    if len(xy) == 0:
        return xy, flag
    uniq, inv = np.unique(xy, axis=0, return_inverse=True)
    inv = np.asarray(inv).ravel()
    here = np.zeros(len(uniq), bool)
    np.logical_or.at(here, inv, flag)
    return uniq, here


def inside_extent(presence: pd.DataFrame, xy, *, chunk: int = 1_000_000) -> np.ndarray:
    """True at the points whose nearest well of known presence has the unit (nearest-neighbour rule).

    All True when no well shows the unit absent (present everywhere); all False when no well shows it
    present. ``xy`` has shape (n, 2) in the store CRS; returns a bool array of length n. Points exactly
    halfway between a present and an absent well may go either way.
    """
    from scipy.spatial import cKDTree

    xy = np.asarray(xy, float).reshape(-1, 2)
    pts, here = _presence_points(presence)
    if not (~here).any():
        return np.ones(len(xy), bool)
    if not here.any():
        return np.zeros(len(xy), bool)
    tree = cKDTree(pts)
    out = np.empty(len(xy), bool)
    for i in range(0, len(xy), chunk):
        _, idx = tree.query(xy[i:i + chunk], k=1)
        out[i:i + chunk] = here[idx]
    return out


def presence_extent(presence: pd.DataFrame, *, clip=None):
    """The region closer to wells that have the unit than to wells that lack it, as a polygon.

    The union of the Voronoi cells of the present wells (the same rule as :func:`inside_extent`),
    intersected with ``clip`` (a shapely geometry: the domain polygon or the area of interest; default:
    the wells' bounding box grown by its larger side on every side).

    Returns
    -------
    shapely geometry or None
        None when no well shows the unit absent (present everywhere); an empty polygon when no well
        shows it present.
    """
    import shapely

    pts, here = _presence_points(presence)
    if not (~here).any():
        return None
    if not here.any():
        return shapely.Polygon()
    if clip is None:
        x0, y0 = presence[["x", "y"]].min().to_numpy(float)
        x1, y1 = presence[["x", "y"]].max().to_numpy(float)
        grow = max(x1 - x0, y1 - y0, 1.0)
        clip = shapely.box(x0 - grow, y0 - grow, x1 + grow, y1 + grow)
    x0, y0, x1, y1 = clip.bounds
    reach = max(x1 - x0, y1 - y0, float(np.ptp(pts[:, 0])), float(np.ptp(pts[:, 1])), 1.0)
    frame = shapely.box(min(x0, pts[:, 0].min()) - reach, min(y0, pts[:, 1].min()) - reach,
                        max(x1, pts[:, 0].max()) + reach, max(y1, pts[:, 1].max()) + reach)
    if len(pts) == 2:  # GEOS needs three sites: the two cells are split by the perpendicular bisector
        mid = pts.mean(axis=0)
        d = pts[1] - pts[0]
        normal = np.array([-d[1], d[0]]) * (4 * reach / np.hypot(*d))
        along = d / np.hypot(*d) * 4 * reach
        i = int(np.argmax(here))
        side = -1 if i == 0 else 1
        cell = shapely.Polygon([mid + normal, mid - normal, mid - normal + side * along,
                                mid + normal + side * along])
        return shapely.make_valid(cell.intersection(frame).intersection(clip))
    cells = shapely.voronoi_polygons(shapely.MultiPoint(pts), extend_to=frame, ordered=True)
    keep = [g for g, h in zip(shapely.get_parts(cells), here) if h]
    return shapely.make_valid(shapely.union_all(keep).intersection(frame).intersection(clip))


def unit_extent(picks: pd.DataFrame, wells: pd.DataFrame, units: pd.DataFrame, code: str, *, clip=None,
                tolerance: float = EXTENT_TOLERANCE):
    """Where a unit is present, from the picks: :func:`unit_presence` then :func:`presence_extent`.

    Returns a shapely geometry in the store CRS, None when the unit is present everywhere (no well
    shows it absent), or an empty polygon when no well shows it present.
    """
    return presence_extent(unit_presence(picks, wells, units, code, tolerance=tolerance), clip=clip)
