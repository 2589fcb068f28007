"""Hydrographs (``hydroatlas hydrographs``): head against time per zone and spring discharge against time, on the
truth district (tests/truthdistrict.py: a feet store with five years of monthly heads, pumping and supply wells,
poor readings and a spring with discharge in gpm).

The CSVs must hold exactly what the selection policy keeps, checked against the district's own files (not
through hydroatlas); the figures must open as PNG (PIL) and SVG (an XML parser) and name feet on the head axis.
"""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET

import numpy as np
import pandas as pd
import pint
import pytest
from PIL import Image

from hydroatlas.export import figures
from hydroatlas.selection import select_readings
from hydroatlas.store import open_store
from hydroatlas.workflows.hydrographs import rate_unit_of
from truth_fixtures import copy_store, ok, run

SVG = "{http://www.w3.org/2000/svg}"



def svg_texts(path) -> list[str]:
    """Every text of an SVG written with live text (svg.fonttype 'none'), parsed as XML."""
    root = ET.parse(path).getroot()
    return ["".join(t.itertext()) for t in root.iter(f"{SVG}text")]


def file_readings(truth) -> pd.DataFrame:
    """The district's head file as readings (head, or ref_elev minus depth_to_water), read with pandas only."""
    h = pd.read_csv(truth.files["heads"], dtype={"well_id": str, "zone_id": str})
    h["value"] = h["head"].fillna(h["ref_elev"] - h["depth_to_water"])
    return h


@pytest.fixture(scope="module")
def all_wells(truth, truth_store, tmp_path_factory):
    """hydrographs of every well with the drought and normal windows shaded."""
    out = tmp_path_factory.mktemp("hydrographs_all")
    res = ok("hydrographs", truth_store, "--window", truth.drought_window, "--baseline", truth.normal_window,
             "--shade", f"drought={truth.drought_window}", "--out", out, "--format", "json")
    return out, json.loads(res.stdout), res


def test_head_csv_holds_exactly_the_readings_the_policy_keeps(truth, truth_store, all_wells):
    """Counts per zone and values equal the district's file after the default policy, applied here by hand:
    poor readings out, every level in a well of kind pumping or supply out (common practice: such a level is the
    head minus the cone and the well loss). The file is the source; pandas reads it, not hydroatlas."""
    out, _, _ = all_wells
    drawn = pd.read_csv(out / "hydrograph_heads.csv", dtype={"well_id": str, "zone_id": str})
    assert list(drawn.columns) == ["well_id", "zone_id", "unit", "measured_at", "head", "length_unit"]
    assert set(drawn["length_unit"]) == {"ft"}
    f = file_readings(truth)
    pumped = {w for w, k in truth.well_kind.items() if k in ("pumping", "supply")}
    kept = f[(f["quality"] != "poor") & ~f["well_id"].isin(pumped)]
    assert len(kept) < len(f)  # the policy left something out
    expected = kept.groupby(["well_id", "zone_id"]).size()
    got = drawn.groupby(["well_id", "zone_id"]).size()
    pd.testing.assert_series_equal(got.sort_index(), expected.sort_index(), check_names=False)
    merged = drawn.merge(kept, on=["well_id", "zone_id", "measured_at"], how="outer", indicator=True)
    assert (merged["_merge"] == "both").all()
    np.testing.assert_allclose(merged["head_x"], merged["value"], atol=1e-6)
    # each zone carries the unit the district put it in
    unit_of = {k: u for u in truth.head_units for k in truth.monitored_zones[u]}
    units = {(w, z): u for w, z, u in drawn[["well_id", "zone_id", "unit"]].itertuples(index=False)}
    assert units == {k: unit_of[k] for k in units}


def test_head_csv_counts_equal_the_stores_selection(truth_store, all_wells):
    """The same counts as the store's own selection (hydroatlas.selection.select_readings, default policy)."""
    out, result, _ = all_wells
    drawn = pd.read_csv(out / "hydrograph_heads.csv", dtype={"well_id": str, "zone_id": str})
    with open_store(truth_store) as s:
        readings, left_out = select_readings(s)
    pd.testing.assert_series_equal(drawn.groupby(["well_id", "zone_id"]).size(),
                                   readings.groupby(["well_id", "zone_id"]).size())
    assert sum(e["count"] for e in result["selection"]["left_out"]) == sum(e["count"] for e in left_out) > 0
    assert result["n_head_readings"] == len(drawn)


def test_discharge_csv_is_the_spring_record_in_its_rate_unit(truth, all_wells):
    """Spring discharge: every reading of the file, in gpm as given."""
    out, result, _ = all_wells
    drawn = pd.read_csv(out / "hydrograph_discharge.csv")
    assert list(drawn.columns) == ["spring_id", "unit", "measured_at", "discharge", "rate_unit"]
    src = pd.read_csv(truth.files["discharge"])
    assert len(drawn) == len(src) == 60
    assert set(drawn["rate_unit"]) == {"gpm"} and result["rate_units"] == {truth.spring_id: "gpm"}
    np.testing.assert_allclose(drawn.sort_values("measured_at")["discharge"].to_numpy(),
                               src.sort_values("measured_at")["discharge"].to_numpy(), rtol=1e-12)


def test_figures_open_and_name_feet_and_the_windows(truth, all_wells):
    """One PNG and one SVG per well with readings and per spring; both open (PIL, XML parser); the head axis
    names feet and the datum, the legend names zone and unit, the windows are labelled."""
    out, result, _ = all_wells
    drawn = pd.read_csv(out / "hydrograph_heads.csv", dtype={"well_id": str, "zone_id": str})
    assert set(result["files"]["wells"]) == set(drawn["well_id"])
    for paths in list(result["files"]["wells"].values()) + list(result["files"]["springs"].values()):
        png, svg = paths
        with Image.open(png) as im:
            im.verify()
        with Image.open(png) as im:
            assert im.format == "PNG" and im.size[0] > 600 and im.size[1] > 300
        assert svg_texts(svg)
    texts = svg_texts(out / "MZ-01_hydrograph.svg")
    assert "Hydraulic head (ft above an unspecified datum)" in texts
    zones = drawn[drawn["well_id"] == "MZ-01"][["zone_id", "unit"]].drop_duplicates()
    assert len(zones) >= 3
    for z, u in zones.itertuples(index=False):
        assert f"zone {z}, unit {u}" in texts
    start, end = truth.drought_window.split("/")
    assert f"drought: {start} to {end}" in texts and f"window: {start} to {end}" in texts
    b0, b1 = truth.normal_window.split("/")
    assert f"baseline: {b0} to {b1}" in texts
    spring = svg_texts(out / f"{truth.spring_id}_discharge_hydrograph.svg")
    assert "Discharge (gpm)" in spring


def test_a_unit_keeps_its_colour_in_every_figure(truth, truth_store, tmp_path):
    """The line of a UD zone has the same colour in a multi-zone well's figure and in a single-zone well's
    figure made by another run: the colour follows the unit's rank, not the figure."""
    a = json.loads(ok("hydrographs", truth_store, "--wells", "MZ-01", "--out", tmp_path / "a",
                      "--format", "json").stdout)
    b = json.loads(ok("hydrographs", truth_store, "--unit", "UD", "--out", tmp_path / "b",
                      "--format", "json").stdout)
    colour = figures.unit_colours(["UA", "UB", "UC", "UD", "UE", "UF"])["UD"]
    for folder, well in ((tmp_path / "a", "MZ-01"), (tmp_path / "b", "UD-01")):
        side = json.loads((folder / "hydrographs.json").read_text())
        assert side["unit_colours"]["UD"] == colour
        strokes = ET.parse(folder / f"{well}_hydrograph.svg").getroot().iter(f"{SVG}path")
        assert any(f"stroke: {colour.lower()}" in (p.get("style") or "").lower() for p in strokes)
    assert {r["unit"] for r in b["summary"] if r["kind"] == "head"} == {"UD"}
    assert {r["unit"] for r in a["summary"] if r["kind"] == "head"} == {"UB", "UD", "UE", "UF"}


def test_unit_option_draws_its_zones_and_springs_only(truth, truth_store, tmp_path):
    """--unit UF: only zones of UF, and no spring (the district's spring issues from UD)."""
    res = ok("hydrographs", truth_store, "--unit", "UF", "--out", tmp_path, "--format", "json")
    out = json.loads(res.stdout)
    drawn = pd.read_csv(tmp_path / "hydrograph_heads.csv", dtype={"well_id": str, "zone_id": str})
    assert set(drawn["unit"]) == {"UF"}
    assert set(zip(drawn["well_id"], drawn["zone_id"])) == set(truth.monitored_zones["UF"])
    assert out["n_discharge_readings"] == 0 and not out["files"]["springs"]
    assert pd.read_csv(tmp_path / "hydrograph_discharge.csv").empty


def test_a_pumping_well_asked_for_is_drawn_only_with_include_pumping_wells(truth, truth_store, tmp_path):
    """--wells PW-2 (kind pumping): its levels are left out by default, with a warning; brought back by
    --include-pumping-wells (all 60 readings)."""
    res = ok("hydrographs", truth_store, "--wells", "PW-2", "--out", tmp_path / "a")
    assert "PW-2 has no head reading" in res.stderr
    assert pd.read_csv(tmp_path / "a" / "hydrograph_heads.csv").empty
    ok("hydrographs", truth_store, "--wells", "PW-2", "--include-pumping-wells", "--out", tmp_path / "b")
    drawn = pd.read_csv(tmp_path / "b" / "hydrograph_heads.csv")
    assert len(drawn) == 60 and set(drawn["well_id"]) == {"PW-2"}


def test_mixed_rate_units_are_shown_in_the_most_used_one(truth, truth_store, tmp_path):
    """Readings given in cfs beside the gpm record are drawn in gpm, converted; pint is the reference for
    1 ft3/s in US gallons per minute."""
    store = copy_store(truth_store, tmp_path / "store.gpkg")
    extra = pd.DataFrame({"spring_id": [truth.spring_id] * 2,
                          "measured_at": ["2024-01-20T09:00:00", "2024-02-20T09:00:00"],
                          "discharge": [1.5, 2.0], "rate_unit": ["cfs", "cfs"]})
    extra.to_csv(tmp_path / "more.csv", index=False)
    ok("import", store, "discharge", tmp_path / "more.csv")
    ok("hydrographs", store, "--springs", truth.spring_id, "--unit", "UF", "--out", tmp_path / "out")
    drawn = pd.read_csv(tmp_path / "out" / "hydrograph_discharge.csv")
    assert len(drawn) == 62 and set(drawn["rate_unit"]) == {"gpm"}
    gpm_per_cfs = pint.UnitRegistry().Quantity(1.0, "ft**3/s").to("gallon/minute").magnitude
    got = drawn.set_index("measured_at").loc[extra["measured_at"], "discharge"].to_numpy()
    np.testing.assert_allclose(got, extra["discharge"].to_numpy() * gpm_per_cfs, rtol=1e-9)


def test_rate_unit_of_takes_the_most_used_then_the_first():
    assert rate_unit_of(pd.Series(["gpm", "cfs", "cfs"])) == "cfs"
    assert rate_unit_of(pd.Series(["L/s", "gpm", "gpm", "L/s"])) == "L/s"


@pytest.mark.parametrize("args, names", [
    (["--wells", "NO-SUCH"], "--wells"),
    (["--wells", "MZ-01,,UD-01"], "--wells"),
    (["--springs", "NO-SUCH"], "--springs"),
    (["--unit", "NOPE"], "unit 'NOPE'"),
    (["--shade", "drought"], "--shade"),
    (["--shade", "drought=2022-06-01"], "--shade"),
    (["--window", "2022-06"], "--window"),
    (["--baseline", "2022-06-01/2021-01-01"], "--baseline"),
])
def test_bad_options_exit_2_naming_the_option(truth_store, tmp_path, args, names):
    res = run("hydrographs", truth_store, *args, "--out", tmp_path)
    assert res.exit_code == 2, res.output
    assert names in res.stderr and "Traceback" not in res.output
    assert not list(tmp_path.iterdir())  # nothing written


def test_head_hydrograph_refuses_rows_without_a_head(tmp_path):
    from hydroatlas.errors import ParameterError

    rows = pd.DataFrame({"zone_id": ["Z", "Z"], "unit": ["A", "A"], "measured_at": ["2024-01-01", "2024-02-01"],
                         "head": [1.0, np.nan]})
    with pytest.raises(ParameterError, match="finite head"):
        figures.head_hydrograph(tmp_path / "x", "W", rows, colours={"A": "#000000"}, length_unit="ft")
    assert not list(tmp_path.iterdir())


def test_head_axis_names_the_length_unit_and_the_vertical_datum(tmp_path):
    """A store's datum label appears on the head axis ('m above LOCAL DATUM 1'); shade labels other than window
    and baseline are drawn under their own names."""
    rows = pd.DataFrame({"zone_id": ["Z1", "Z1", "Z2"], "unit": ["A", "A", None],
                         "measured_at": ["2024-01-01", "2024-02-01T06:00:00", "2024-01-15"],
                         "head": [101.0, 100.5, 95.0]})
    png, svg = figures.head_hydrograph(tmp_path / "w", "W-9", rows, colours={"A": "#0072B2"}, length_unit="m",
                                       vertical_datum="LOCAL DATUM 1",
                                       shades=[("dry spell", "2024-01-10", "2024-01-20")])
    texts = svg_texts(svg)
    assert "Hydraulic head (m above LOCAL DATUM 1)" in texts
    assert "dry spell: 2024-01-10 to 2024-01-20" in texts
    assert "zone Z1, unit A" in texts and "zone Z2, unit (none)" in texts
    assert png.name == "w.png" and svg.name == "w.svg"
