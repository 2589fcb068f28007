"""Data-quality findings over the store's tables (pure: DataFrames in, findings out)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from .assign import finest_picks

# A K test is an outlier when its log10 K lies more than this many sample
# standard deviations from its unit's mean (needs at least MIN_TESTS_FOR_OUTLIER tests).
K_OUTLIER_SD = 3.0
MIN_TESTS_FOR_OUTLIER = 5
# A zone's median head is far outside its unit when its robust z-score
# (distance from the unit median over 1.4826 MAD) exceeds this.
HEAD_OUTLIER_Z = 5.0
# Pick gaps and overlaps shorter than this (store length unit) are ignored.
PICK_TOLERANCE = 0.01


def _finding(kind, severity, message, **where) -> dict:
    row = {"kind": kind, "severity": severity, "well_id": None, "zone_id": None, "unit": None}
    row.update(where)
    row["message"] = message
    return row


def find_issues(*, wells, zones, picks, units, ktests, heads, assignment,
                length_unit: str | None = None) -> list[dict]:
    """Findings about straddles, gaps, overlaps, orphans and outliers.

    Parameters are the store tables as DataFrames; ``assignment`` is the result
    of :func:`hydroatlas.assign.assign_zones`; ``heads`` needs well_id, zone_id, head;
    ``length_unit`` is the store's length unit, named in messages that give a length; K outliers are
    reported as log10 of K in that unit per day (m/s when it is not given), the unit said in the message.
    """
    out: list[dict] = []
    asg = assignment
    for r in asg[asg["straddles"]].itertuples():
        out.append(_finding("straddle", "warning",
                            f"zone crosses units {r.units_crossed}; assigned to {r.unit} "
                            f"({r.overlap_fraction:.0%} of its length)",
                            well_id=r.well_id, zone_id=r.zone_id, unit=r.unit))
    for r in asg[(asg["assigned_by"] != "override") & (asg["coverage"] < 1 - 1e-6)].itertuples():
        if r.assigned_by == "none":
            msg = "zone lies outside every picked unit of its well; it has no unit"
        else:
            msg = f"{1 - r.coverage:.0%} of the zone lies outside the picked units"
        out.append(_finding("zone_outside_units", "warning", msg, well_id=r.well_id, zone_id=r.zone_id,
                            unit=r.unit))
    for r in asg[asg["assigned_by"] == "inferred"].itertuples():
        out.append(_finding("inferred_unit", "info", f"unit {r.unit} from picks inferred at neighbouring wells",
                            well_id=r.well_id, zone_id=r.zone_id, unit=r.unit))
    out += _pick_findings(wells, picks, units)
    out += _zone_overlaps(zones, length_unit)
    with_picks = set(picks["well_id"])
    for w in wells.loc[~wells["well_id"].isin(with_picks), "well_id"]:
        out.append(_finding("well_without_picks", "warning",
                            "well has no unit picks; its zones use inferred unit elevations", well_id=w))
    for w in wells.loc[~wells["well_id"].isin(set(zones["well_id"])), "well_id"]:
        out.append(_finding("well_without_zones", "info", "well has no zones (no tests or heads can refer to it)",
                            well_id=w))
    measured = set(zip(ktests["well_id"], ktests["zone_id"])) | set(zip(heads["well_id"], heads["zone_id"]))
    for r in zones.itertuples():
        if (r.well_id, r.zone_id) not in measured:
            out.append(_finding("zone_without_data", "info", "zone has neither K tests nor heads",
                                well_id=r.well_id, zone_id=r.zone_id))
    tested = ktests.merge(asg[["well_id", "zone_id", "unit"]], on=["well_id", "zone_id"], how="left")
    for code in units.loc[~units["code"].isin(set(tested["unit"].dropna())), "code"]:
        out.append(_finding("unit_without_tests", "info", "no K test is assigned to this unit", unit=code))
    out += _k_outliers(tested, f"{length_unit}/d" if length_unit else "m/s")
    out += _head_findings(heads, asg)
    return out


def _pick_findings(wells, picks, units) -> list[dict]:
    out = []
    if picks.empty:
        return out
    rank = dict(zip(units["code"], units["rank"]))
    fine = finest_picks(picks, units).copy()
    fine["rank"] = fine["unit"].map(rank)
    total = dict(zip(wells["well_id"], wells["total_depth"]))
    for well, g in fine.sort_values(["well_id", "top_depth"]).groupby("well_id"):
        prev = None
        for r in g.itertuples():
            td = total.get(well)
            if td is not None and np.isfinite(td) and r.bottom_depth > td + PICK_TOLERANCE:
                out.append(_finding("pick_below_total_depth", "info",
                                    f"pick of {r.unit} reaches {r.bottom_depth:g}, below total depth {td:g}",
                                    well_id=well, unit=r.unit))
            if prev is not None:
                if r.top_depth > prev.bottom_depth + PICK_TOLERANCE:
                    out.append(_finding("pick_gap", "warning",
                                        f"gap between {prev.unit} (bottom {prev.bottom_depth:g}) and {r.unit} "
                                        f"(top {r.top_depth:g})", well_id=well, unit=r.unit))
                elif r.top_depth < prev.bottom_depth - PICK_TOLERANCE:
                    out.append(_finding("pick_overlap", "warning",
                                        f"{r.unit} (top {r.top_depth:g}) overlaps {prev.unit} "
                                        f"(bottom {prev.bottom_depth:g})", well_id=well, unit=r.unit))
                if r.rank < prev.rank:
                    out.append(_finding("pick_order", "warning",
                                        f"{r.unit} lies below {prev.unit} but ranks above it in the unit list",
                                        well_id=well, unit=r.unit))
            prev = r
    return out


def _zone_overlaps(zones: pd.DataFrame, length_unit: str | None) -> list[dict]:
    """One finding per pair of zones of one well whose depth intervals overlap by more than PICK_TOLERANCE.

    A reading or test of either zone then samples water of both; usually a typing error in a depth.
    """
    out = []
    if zones.empty:
        return out
    unit = f" {length_unit}" if length_unit else " (store length unit)"
    z = zones[["well_id", "zone_id", "top_depth", "bottom_depth"]].sort_values(["well_id", "top_depth",
                                                                                "bottom_depth", "zone_id"])
    for well, g in z.groupby("well_id", sort=True):
        rows = list(g.itertuples(index=False))
        for i, a in enumerate(rows):
            for b in rows[i + 1:]:
                if b.top_depth >= a.bottom_depth - PICK_TOLERANCE:
                    break  # sorted by top: no later zone reaches up into a
                lap = min(a.bottom_depth, b.bottom_depth) - b.top_depth
                if lap <= PICK_TOLERANCE:
                    continue
                out.append(_finding("zone_overlap", "warning",
                                    f"zones {a.zone_id} (depth {a.top_depth:g}-{a.bottom_depth:g}) and {b.zone_id} "
                                    f"(depth {b.top_depth:g}-{b.bottom_depth:g}) overlap by {lap:g}{unit}",
                                    well_id=well, zone_id=a.zone_id, other_zone_id=b.zone_id, overlap=float(lap)))
    return out


def _k_outliers(tested: pd.DataFrame, k_unit: str = "m/s") -> list[dict]:
    """K tests far from their unit's mean log10 K; the messages give log10 of K in ``k_unit`` and say so."""
    from .quantities import k_from_ms

    out = []
    t = tested[tested["unit"].notna()].copy()
    if t.empty:
        return out
    t["lg"] = np.log10(k_from_ms(t["k_ms"].to_numpy(float), k_unit))
    grp = t.groupby("unit")["lg"]
    t["mean"] = grp.transform("mean")
    t["sd"] = grp.transform(lambda s: s.std(ddof=1))
    t["n"] = grp.transform("size")
    flag = (t["n"] >= MIN_TESTS_FOR_OUTLIER) & ((t["lg"] - t["mean"]).abs() > K_OUTLIER_SD * t["sd"])
    for r in t[flag].itertuples():
        out.append(_finding("k_outlier", "warning",
                            f"log10 K = {r.lg:.2f} (K in {k_unit}) lies {abs(r.lg - r.mean) / r.sd:.1f} standard "
                            f"deviations from the unit mean {r.mean:.2f} (test {r.test_id})",
                            well_id=r.well_id, zone_id=r.zone_id, unit=r.unit))
    return out


def _head_findings(heads: pd.DataFrame, asg: pd.DataFrame) -> list[dict]:
    out = []
    if heads.empty:
        return out
    med = heads.groupby(["well_id", "zone_id"])["head"].median().rename("head").reset_index()
    h = med.merge(asg[["well_id", "zone_id", "unit", "bottom_elev"]], on=["well_id", "zone_id"], how="left")
    for r in h[h["head"] < h["bottom_elev"]].itertuples():
        out.append(_finding("head_below_zone", "warning",
                            f"median head {r.head:.2f} is below the bottom of the zone ({r.bottom_elev:.2f}); "
                            "a dry zone or a datum error", well_id=r.well_id, zone_id=r.zone_id, unit=r.unit))
    h = h[h["unit"].notna()].copy()
    grp = h.groupby("unit")["head"]
    h["median_u"] = grp.transform("median")
    h["mad"] = grp.transform(lambda s: (s - s.median()).abs().median()) * 1.4826
    h["n"] = grp.transform("size")
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (h["head"] - h["median_u"]).abs() / h["mad"]
    flag = (h["n"] >= MIN_TESTS_FOR_OUTLIER) & (h["mad"] > 0) & (z > HEAD_OUTLIER_Z)
    for r, zz in zip(h[flag].itertuples(), z[flag]):
        out.append(_finding("head_outlier", "warning",
                            f"median head {r.head:.2f} is far from the unit's median {r.median_u:.2f} "
                            f"(robust z = {zz:.1f})", well_id=r.well_id, zone_id=r.zone_id, unit=r.unit))
    return out
