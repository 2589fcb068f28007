"""Zone-to-unit assignment: overlaps computed by hand from the interval definitions (common practice, no source)."""

import numpy as np
import pandas as pd
import pytest

from hydroatlas.assign import assign_zones, infer_picks

UNITS = pd.DataFrame({"code": ["A", "B", "C"], "name": list("abc"), "rank": [1, 2, 3],
                      "role": ["aquifer", "aquitard", "aquifer"], "parent": [None, None, None]})


def _wells(*rows):
    return pd.DataFrame(rows, columns=["well_id", "x", "y", "ground_elev", "total_depth"])


def _picks(*rows):
    return pd.DataFrame(rows, columns=["well_id", "unit", "top_depth", "bottom_depth"])


def _zones(*rows):
    return pd.DataFrame(rows, columns=["well_id", "zone_id", "top_depth", "bottom_depth", "unit"])


WELLS = _wells(("W", 0.0, 0.0, 100.0, 80.0))
PICKS = _picks(("W", "A", 0, 20), ("W", "B", 20, 30), ("W", "C", 30, 80))


def test_zone_inside_one_unit():
    out = assign_zones(_zones(("W", "z", 5, 15, None)), PICKS, WELLS, UNITS)
    r = out.iloc[0]
    assert (r.unit, r.assigned_by, bool(r.straddles)) == ("A", "picks", False)
    assert r.overlap_fraction == pytest.approx(1.0)
    assert (r.top_elev, r.bottom_elev, r.mid_elev) == (95.0, 85.0, 90.0)


def test_straddle_goes_to_largest_overlap():
    out = assign_zones(_zones(("W", "z", 16, 26, None)), PICKS, WELLS, UNITS)
    r = out.iloc[0]
    assert r.unit == "B" and bool(r.straddles)
    assert r.overlap_fraction == pytest.approx(0.6)
    assert r.units_crossed == "A,B"


def test_override_wins():
    out = assign_zones(_zones(("W", "z", 16, 26, "A")), PICKS, WELLS, UNITS)
    assert out.iloc[0].unit == "A" and out.iloc[0].assigned_by == "override"


def test_zone_below_picks_has_no_unit():
    wells = _wells(("W", 0.0, 0.0, 100.0, 200.0))
    out = assign_zones(_zones(("W", "z", 90, 100, None)), PICKS, wells, UNITS)
    assert out.iloc[0].assigned_by == "none" and out.iloc[0].unit is None


def test_inferred_picks_between_neighbours():
    """A well midway between two wells with picks gets the IDW mean of their contact elevations."""
    wells = _wells(("W1", 0.0, 0.0, 100.0, 80.0), ("W2", 200.0, 0.0, 100.0, 80.0), ("X", 100.0, 0.0, 100.0, 80.0))
    picks = _picks(("W1", "A", 0, 20), ("W1", "B", 20, 30), ("W1", "C", 30, 80),
                   ("W2", "A", 0, 30), ("W2", "B", 30, 40), ("W2", "C", 40, 60))
    inferred = infer_picks(wells, picks, UNITS).set_index("unit")
    assert inferred.loc["A", "bottom_depth"] == pytest.approx(25.0)
    assert inferred.loc["B", "bottom_depth"] == pytest.approx(35.0)
    # C ends at total depth in W1 (80): only W2's bottom informs the base of C
    assert inferred.loc["C", "bottom_depth"] == pytest.approx(60.0)
    out = assign_zones(_zones(("X", "z", 26, 34, None)), picks, wells, UNITS)
    assert out.iloc[0].unit == "B" and out.iloc[0].assigned_by == "inferred"


def test_parent_picks_yield_to_sub_units():
    units = pd.DataFrame({"code": ["P", "P1", "P2"], "name": list("abc"), "rank": [1, 2, 3],
                          "role": ["aquifer"] * 3, "parent": [None, "P", "P"]})
    picks = _picks(("W", "P", 0, 40), ("W", "P1", 0, 15), ("W", "P2", 15, 40))
    out = assign_zones(_zones(("W", "z", 20, 30, None)), picks, WELLS, units)
    assert out.iloc[0].unit == "P2" and not out.iloc[0].straddles


def test_many_zones_vectorised():
    rng = np.random.default_rng(1)
    n = 2000
    wells = _wells(*[(f"W{i}", float(i), 0.0, 100.0, 80.0) for i in range(n)])
    picks = _picks(*[(f"W{i}", u, t, b) for i in range(n) for u, t, b in (("A", 0, 20), ("B", 20, 30), ("C", 30, 80))])
    tops = rng.uniform(0, 70, n)
    zones = _zones(*[(f"W{i}", "z", tops[i], tops[i] + 5, None) for i in range(n)])
    out = assign_zones(zones, picks, wells, UNITS)
    expected = np.where(tops + 2.5 < 20, "A", np.where(tops + 2.5 < 30, "B", "C"))
    assert (out["unit"].to_numpy() == expected).all()


def test_inferred_picks_follow_the_unit_extent():
    """A unit the picks show absent in the west is not inferred at a well without picks there (common practice).

    B lies only under the east wells; at the west wells the picks of A and C touch. A well without picks
    near the west wells gets A and C but no B, and a zone at B's depth there goes to A or C, not to B;
    a well without picks in the east still gets B.
    """
    east = [(f"E{j}", 1000.0, 100.0 * j) for j in range(3)]
    west = [(f"V{j}", 0.0, 100.0 * j) for j in range(3)]
    wells = _wells(*[(w, x, y, 100.0, 80.0) for w, x, y in east + west],
                   ("XW", 100.0, 100.0, 100.0, 80.0), ("XE", 900.0, 100.0, 100.0, 80.0))
    picks = _picks(*[r for w, _, _ in east for r in ((w, "A", 0, 20), (w, "B", 20, 30), (w, "C", 30, 80))],
                   *[r for w, _, _ in west for r in ((w, "A", 0, 25), (w, "C", 25, 80))])
    inferred = infer_picks(wells, picks, UNITS)
    assert set(inferred.loc[inferred["well_id"] == "XW", "unit"]) == {"A", "C"}
    assert set(inferred.loc[inferred["well_id"] == "XE", "unit"]) == {"A", "B", "C"}
    out = assign_zones(_zones(("XW", "z", 21, 24, None), ("XE", "z", 22, 28, None)), picks, wells, UNITS)
    units = dict(zip(out["well_id"], out["unit"]))
    assert units["XW"] in ("A", "C") and units["XE"] == "B"
