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
    above and at or below ground, each bottom at or below its top). Units that
    come out with zero thickness are left out (pinched out).

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
    for code, top, bottom in zip(codes, tops, bottoms):
        top = np.minimum(top, ceiling)
        bottom = np.minimum(bottom, top)
        ceiling = bottom
        for wid, g, t, b in zip(targets["well_id"], ground, top, bottom):
            if t - b > 0:
                rows.append((wid, code, max(g - t, 0.0), g - b))
    return pd.DataFrame(rows, columns=cols)


def assign_zones(zones: pd.DataFrame, picks: pd.DataFrame, wells: pd.DataFrame, units: pd.DataFrame, *,
                 infer: bool = True) -> pd.DataFrame:
    """Give every zone a unit.

    A zone inside one unit gets it; a zone that crosses units goes to the
    unit with the largest overlap (ties to the upper unit) and is flagged as
    straddling; a ``unit`` override in the zone row wins. Zones in wells
    without picks use :func:`infer_picks` and are flagged ``inferred``.

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
        guessed = infer_picks(wells, picks, units).assign(inferred=True)
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
