"""Option values: every numeric option has a declared range, and a value outside it (or not finite, or not a
number) is refused with exit code 2 and one line that names the option, never an internal error.

Also: the automatic surface grid on data at one location or on one line, and the library functions these
options reach (grid spec, particle tracking, Theis drawdown), which refuse the same values on their own.
"""

import json

import click
import numpy as np
import pytest
import rasterio

from hydroatlas.cli import _common as cli_module
from hydroatlas.errors import ParameterError

from conftest import CRS, cli, write_csv

# command -> the other arguments it needs to get as far as reading the option
NEEDS = {
    "surface": ["--unit", "TOP"],
    "paths": ["--unit", "TOP"],
    "drawdown": ["--unit", "TOP", "--days", "10"],
    "grid": ["--cell", "100"],
    "verticals": [],
    "threepoint": ["--unit", "TOP", "--wells", "W1,W2,W3"],
}

BAD_VALUES = [
    ("surface", "--cell", ["inf", "nan", "0", "-5", "abc"]),
    ("surface", "--nugget", ["-1", "nan"]),
    ("surface", "--sill", ["0", "-1", "inf"]),
    ("surface", "--range", ["0", "-2", "nan"]),
    ("surface", "--neighbors", ["-1", "2.5", "nan"]),
    ("surface", "--buffer", ["0", "-1", "inf"]),
    ("surface", "--max-cells", ["0", "-3", "1.5"]),
    ("paths", "--porosity", ["0", "1.5", "nan", "-0.1"]),
    ("paths", "--seed-spacing", ["0", "-1", "inf"]),
    ("paths", "--capture-radius", ["-1", "0", "nan"]),
    ("paths", "--max-years", ["-1", "0", "inf", "nan"]),
    ("drawdown", "--days", ["-3", "0", "inf", "nan"]),
    ("drawdown", "-S", ["0", "1", "1.5", "nan", "-1e-4"]),
    ("drawdown", "-T", ["0", "-5", "inf"]),
    ("drawdown", "--threshold", ["-1", "nan"]),
    ("drawdown", "--rate", ["W1=nan", "W1=inf", "W1", "=5", "W1=abc"]),
    ("drawdown", "--new-well", ["1,2,inf", "nan,2,3", "1,2", "a,b,c,d,e"]),
    ("grid", "--cell", ["inf", "0", "-5"]),
    ("grid", "--rotation", ["nan", "inf", "400"]),
    ("grid", "--kv-ratio", ["0", "-1", "nan"]),
    ("grid", "--min-thickness", ["-1", "0", "nan"]),
    ("grid", "--max-cells", ["0"]),
    ("grid", "--origin", ["nan,5", "5", "inf,inf"]),
    ("grid", "--shape", ["0,3", "3", "2.5,3", "-1,4"]),
    ("surface", "--window", ["2024/2025", "2024-03/2024-04", "2024-03-01", "2024-03-01/2024"]),
    ("surface", "--at", ["2024", "2024-06", "June"]),
    ("verticals", "--window", ["2024/2025"]),
    ("verticals", "--at", ["2024"]),
    ("threepoint", "--window", ["2024/2025"]),
    ("threepoint", "--at", ["2024"]),
]
CASES = [(cmd, opt, v) for cmd, opt, values in BAD_VALUES for v in values]


@pytest.mark.parametrize("command,option,value", CASES, ids=[f"{c} {o} {v}" for c, o, v in CASES])
def test_bad_value_is_one_line_exit_2(mini_store, tmp_path, runner, command, option, value):
    needs = list(NEEDS[command])
    if option in needs:  # the option under test replaces the default given here
        i = needs.index(option)
        del needs[i:i + 2]
    out = ["--out", tmp_path / ("model.nc" if command == "grid" else "out")] if command not in (
        "verticals", "threepoint") else []
    res = cli(runner, command, mini_store, *needs, *out, option, value)
    assert res.exit_code == 2, res.output
    lines = res.output.strip().splitlines()
    assert len(lines) == 1, res.output
    assert lines[0].startswith("hydroatlas: error: ") and option in lines[0], lines[0]
    assert "internal error" not in res.output


def test_messages_say_what_is_allowed(mini_store, tmp_path, runner):
    res = cli(runner, "surface", mini_store, "--unit", "TOP", "--cell", "inf", "--out", tmp_path)
    assert res.output == "hydroatlas: error: --cell must be > 0 and finite (got inf)\n"
    res = cli(runner, "drawdown", mini_store, "--unit", "TOP", "--days", 5, "-S", "1.5", "--out", tmp_path)
    assert res.output == "hydroatlas: error: --storativity/-S must be > 0 and < 1 (got 1.5)\n"
    res = cli(runner, "paths", mini_store, "--unit", "TOP", "--porosity", "0", "--out", tmp_path)
    assert res.output == "hydroatlas: error: --porosity must be > 0 and <= 1 (got 0)\n"
    res = cli(runner, "surface", mini_store, "--unit", "TOP", "--max-cells", "0", "--out", tmp_path)
    assert res.output == "hydroatlas: error: --max-cells must be a whole number >= 1 (got 0)\n"
    res = cli(runner, "verticals", mini_store, "--window", "2024/2025")
    assert "--window '2024/2025'" in res.output and "YYYY-MM-DD" in res.output


def test_bounds_are_inclusive_where_declared():
    assert cli_module.FRACTION.check("1", "--porosity") == 1.0
    assert cli_module.NON_NEGATIVE.check("0", "--nugget") == 0.0
    assert cli_module.POSITIVE.check("1e-3", "--cell") == pytest.approx(1e-3)
    assert cli_module.COUNT.check("5", "--max-cells") == 5 and cli_module.COUNT.check(5.0, "--max-cells") == 5
    assert cli_module.ANGLE.check("-360", "--rotation") == -360.0
    for typ, value in ((cli_module.OPEN_FRACTION, "1"), (cli_module.POSITIVE, "0"), (cli_module.COUNT, "5.0")):
        with pytest.raises(click.BadParameter):
            typ.check(value, "--x")


def test_every_numeric_option_declares_its_range():
    """Contract over all commands: no bare float/int option, and every date option is checked."""
    loose, unchecked = [], []
    for name, command in cli_module.main.commands.items():
        for p in command.params:
            if isinstance(p.type, (click.types.FloatParamType, click.types.IntParamType)):
                loose.append(f"{name} {'/'.join(p.opts)}")
            if {"--window", "--baseline", "--at"} & set(p.opts) and p.callback not in (cli_module._window_value,
                                                                                      cli_module._date_value):
                unchecked.append(f"{name} {'/'.join(p.opts)}")
    assert loose == [], "declare these with hydroatlas.cli.Finite (e.g. POSITIVE)"
    assert unchecked == [], "give these callback=_window_value or _date_value"


def test_full_iso_datetimes_still_work(mini_store, runner):
    for args in (["--window", "2024-06-01T00:00:00Z/2024-06-01T12:00"], ["--window", "2024-06-01/2024-06-01"],
                 ["--at", "2024-06-01T12:00:00+02:00"], ["--at", "2024-06-01 10:00"], ["--at", "2024-06-01"]):
        res = cli(runner, "verticals", mini_store, *args, "--format", "json")
        assert res.exit_code == 0, (args, res.output)
        pairs = json.loads(res.output)
        assert {(p["upper_zone"], p["lower_zone"]) for p in pairs if p["well_id"] == "W1"} == {("P1", "P2"),
                                                                                               ("P2", "P3")}


def test_date_time_end_is_not_widened_to_the_whole_day(mini_store, runner):
    # the readings are at 00:00 (W3) and 10:00 (the others): a window from 01:00 to 09:00 holds none
    res = cli(runner, "verticals", mini_store, "--window", "2024-06-01T01:00/2024-06-01T09:00")
    assert res.exit_code == 2 and "no head readings inside" in res.output, res.output
    res = cli(runner, "verticals", mini_store, "--window", "2024-05-31/2024-06-01", "--format", "json")
    assert res.exit_code == 0 and json.loads(res.output), res.output  # a date end takes in its whole day


# -- the automatic grid of a surface ---------------------------------------------------------------------------
def point_store(store, tmp_path, runner, points):
    rows = {"units": [["code", "name", "rank", "role"], ["AQ", "aquifer", 1, "aquifer"]],
            "wells": [["well_id", "x", "y", "ground_elev", "total_depth"]],
            "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
            "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
            "heads": [["well_id", "zone_id", "measured_at", "head"]]}
    for i, (x, y) in enumerate(points):
        rows["wells"].append([f"W{i}", x, y, 400, 100])
        rows["picks"].append([f"W{i}", "AQ", 0, 100])
        rows["zones"].append([f"W{i}", "S", 40, 50])
        rows["heads"].append([f"W{i}", "S", "2024-03-15", 380 + i])
    for kind, table in rows.items():
        res = cli(runner, "import", store, kind, write_csv(tmp_path / f"{kind}.csv", table))
        assert res.exit_code == 0, res.output
    return store


def test_single_well_refused_without_cell_or_domain(empty_store, tmp_path, runner):
    store = point_store(empty_store, tmp_path, runner, [(610000, 4100000)])
    res = cli(runner, "surface", store, "--unit", "AQ", "--method", "idw", "--out", tmp_path / "o")
    assert res.exit_code == 2, res.output
    assert len(res.output.strip().splitlines()) == 1
    assert "at one location" in res.output and "3 wells not on one line" in res.output and "--cell" in res.output
    assert not (tmp_path / "o" / "AQ_head.tif").exists()


def test_single_well_with_cell_gets_a_grid_of_that_cell(empty_store, tmp_path, runner):
    store = point_store(empty_store, tmp_path, runner, [(610000, 4100000)])
    res = cli(runner, "surface", store, "--unit", "AQ", "--method", "idw", "--cell", 50, "--out", tmp_path / "o")
    assert res.exit_code == 0, res.output
    with rasterio.open(tmp_path / "o" / "AQ_head.tif") as r:
        assert r.res == (50.0, 50.0)
        assert r.width >= 100 and r.height >= 100  # a margin of 50 cells each side, not a 20 cm patch
        assert r.bounds.left < 610000 < r.bounds.right and r.bounds.bottom < 4100000 < r.bounds.top
        est = r.read(1, masked=True)
        assert np.allclose(est.compressed(), 380.0)


def test_wells_on_one_line_refused(empty_store, tmp_path, runner):
    store = point_store(empty_store, tmp_path, runner, [(610000, 4100000), (611000, 4101000), (612000, 4102000)])
    res = cli(runner, "surface", store, "--unit", "AQ", "--method", "idw", "--out", tmp_path / "o")
    assert res.exit_code == 2 and "on one line (3 locations)" in res.output, res.output


def test_single_well_inside_a_domain_uses_the_domain(empty_store, tmp_path, runner):
    from pyproj import Transformer

    store = point_store(empty_store, tmp_path, runner, [(610000, 4100000)])
    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    square = [(609000, 4099000), (611000, 4099000), (611000, 4101000), (609000, 4101000), (609000, 4099000)]
    fc = {"type": "FeatureCollection", "features": [{
        "type": "Feature", "properties": {"area_id": "D", "kind": "domain"},
        "geometry": {"type": "Polygon", "coordinates": [[list(tr.transform(x, y)) for x, y in square]]}}]}
    (tmp_path / "areas.geojson").write_text(json.dumps(fc))
    assert cli(runner, "import", store, "areas", tmp_path / "areas.geojson").exit_code == 0
    res = cli(runner, "surface", store, "--unit", "AQ", "--method", "idw", "--out", tmp_path / "o")
    assert res.exit_code == 0, res.output
    with rasterio.open(tmp_path / "o" / "AQ_head.tif") as r:
        assert r.res[0] == pytest.approx(2000 / 200, rel=0.05)  # 1/200 of the domain's side


def test_three_wells_spread_out_keep_the_automatic_grid(empty_store, tmp_path, runner):
    store = point_store(empty_store, tmp_path, runner, [(610000, 4100000), (612000, 4100000), (610000, 4101000)])
    res = cli(runner, "surface", store, "--unit", "AQ", "--method", "idw", "--out", tmp_path / "o")
    assert res.exit_code == 0, res.output
    with rasterio.open(tmp_path / "o" / "AQ_head.tif") as r:
        # the extent plus a tenth each side, over 200 (12), rounded down to a readable size (interp.grid.readable_cell)
        assert r.res[0] == 10.0


# -- the library refuses the same values -----------------------------------------------------------------------
def test_grid_spec_refuses_bad_cells_and_bounds():
    from hydroatlas.interp.grid import GridSpec, auto_cell, spread_rank

    for cell in (float("inf"), float("nan"), 0.0, -1.0):
        with pytest.raises(ParameterError, match="cell size"):
            GridSpec.from_bounds(0, 0, 10, 10, cell)
    with pytest.raises(ParameterError, match="bounds"):
        GridSpec.from_bounds(0, 0, float("nan"), 10, 1.0)
    with pytest.raises(ParameterError, match="bounds"):
        GridSpec.from_bounds(10, 0, 0, 10, 1.0)
    with pytest.raises(ParameterError, match="max_cells"):
        GridSpec.from_bounds(0, 0, 10, 10, 1.0, max_cells=0)
    with pytest.raises(ParameterError, match="too small"):
        GridSpec.from_bounds(4.1e6, 0, 4.1e6 + 1, 1, 1e-6)
    with pytest.raises(ParameterError, match="nrows"):
        GridSpec(0.0, 10.0, 1.0, float("nan"), 3)
    with pytest.raises(ParameterError, match="no extent"):
        auto_cell(5, 5, 5, 5)
    assert auto_cell(0, 0, 400, 100) == 2.0
    assert auto_cell(0, 0, 560, 100) == 2.5  # 2.8, rounded down to a readable size
    assert spread_rank([[1, 1], [1, 1]]) == 0
    assert spread_rank([[0, 0], [1, 1], [3, 3]]) == 1
    assert spread_rank([[0, 0], [1, 0], [0, 1]]) == 2


def test_tracking_refuses_bad_times_and_radii():
    from hydroatlas.flow import VelocityGrid, grid_gradient, track

    field = VelocityGrid(0.0, 10.0, 1.0, np.ones((10, 10)), np.zeros((10, 10)))
    for t_max in (-365.25, 0.0, float("nan"), float("inf")):
        with pytest.raises(ParameterError, match="t_max"):
            track([[1.0, 5.0]], field, t_max=t_max)
    with pytest.raises(ParameterError, match="sink_radius"):
        track([[1.0, 5.0]], field, sinks=[[8.0, 5.0]], sink_radius=-1.0)
    with pytest.raises(ParameterError, match="seeds"):
        track([[float("nan"), 5.0]], field)
    with pytest.raises(ParameterError, match="max_steps"):
        track([[1.0, 5.0]], field, max_steps=0)
    with pytest.raises(ParameterError, match="cell"):
        VelocityGrid(0.0, 10.0, float("inf"), np.ones((2, 2)), np.ones((2, 2)))
    with pytest.raises(ParameterError, match="cell"):
        grid_gradient(np.ones((3, 3)), 0.0)
    with pytest.raises(ParameterError, match="conductivity"):
        VelocityGrid.from_head(0.0, 10.0, 1.0, np.ones((3, 3)), -1.0, 0.1)
    res = track([[1.0, 5.0]], field, t_max=3.0)  # the guards leave good calls alone
    assert res.end_kind[0] == "max_time" and res.time[0] == pytest.approx(3.0)


def test_theis_refuses_storativity_above_one():
    from hydroatlas.pumping import superpose_drawdown, theis_drawdown

    with pytest.raises(ParameterError, match="S must be <= 1"):
        theis_drawdown(10.0, 1.0, Q=100.0, T=50.0, S=1.5)
    with pytest.raises(ParameterError, match="S must be <= 1"):
        superpose_drawdown([[10.0, 0.0]], [[0.0, 0.0]], [100.0], 1.0, T=50.0, S=2.0)
    assert theis_drawdown(10.0, 1.0, Q=100.0, T=50.0, S=1.0) > 0
