"""Bad input is refused whole, with file, row and column named, exit code 2, and the store unchanged.

Every test here runs on both backends (the GeoPackage and PostGIS: `mini_store` and `empty_store` are the
parametrised stores of conftest.py), except those that need the GeoPackage file itself (`gpkg_*` fixtures).
"""

from __future__ import annotations

import sqlite3

import pytest
from pyproj import Transformer

from hydroatlas import open_store
from hydroatlas.errors import ImportDataError
from hydroatlas.store import geopackage
from hydroatlas.store.importers import import_file

from conftest import CRS, MINI, cli, write_csv


@pytest.fixture
def empty_store(any_empty_store):
    """An empty store on each backend (conftest.py: store_backend)."""
    return any_empty_store


@pytest.fixture
def mini_store(any_mini_store):
    """The MINI district on each backend (conftest.py: store_backend)."""
    return any_mini_store


def snapshot(path):
    with open_store(path) as s:
        return s.snapshot()


def rows_with(name, change):
    """The MINI rows of ``name`` with ``change(rows)`` applied to a copy."""
    rows = [list(r) for r in MINI[name]]
    change(rows)
    return rows


def refuse(runner, store, kind, path, *expected):
    before = snapshot(store)
    res = cli(runner, "import", store, kind, path)
    assert res.exit_code == 2, res.output
    message = res.output.strip()
    assert message.count("\n") == 0, "one message line expected"
    for part in expected:
        assert part in message, f"{part!r} not in {message!r}"
    assert snapshot(store) == before
    return message


def set_cell(row, col, value):
    def change(rows):
        rows[row][rows[0].index(col)] = value
    return change


CASES = {
    "missing column": ("zones", lambda r: [x.pop(3) for x in r], ["zones.csv", "header", "'bottom_depth'", "missing"]),
    "non-numeric": ("ktests", set_cell(2, "k", "abc"), ["ktests.csv", "row 2", "'k'", "'abc' is not a number"]),
    "top >= bottom": ("zones", set_cell(3, "bottom_depth", 70), ["zones.csv", "row 3", "'bottom_depth'", "greater"]),
    "zone below total depth": ("zones", set_cell(4, "bottom_depth", 61), ["row 4", "'bottom_depth'", "total_depth"]),
    "k zero": ("ktests", set_cell(1, "k", 0), ["row 1", "'k'", "greater than zero"]),
    "k negative": ("ktests", set_cell(5, "k", -3), ["row 5", "'k'", "greater than zero"]),
    "k NaN": ("ktests", set_cell(3, "k", "NaN"), ["row 3", "'k'"]),
    "k unit": ("ktests", set_cell(2, "k_unit", "furlong/d"), ["row 2", "'k_unit'", "furlong/d"]),
    "unknown well": ("picks", set_cell(4, "well_id", "W99"), ["picks.csv", "row 4", "'well_id'", "W99"]),
    "unknown unit": ("picks", set_cell(2, "unit", "XYZ"), ["row 2", "'unit'", "XYZ"]),
    "unknown zone": ("heads", set_cell(3, "zone_id", "P9"), ["heads.csv", "row 3", "'zone_id'", "P9"]),
    "unknown override": ("zones", set_cell(2, "unit", "XYZ"), ["row 2", "'unit'"]),
    "duplicate key": ("zones", lambda r: r.append(list(r[2])), ["zones.csv", "row 8", "duplicate key", "row 2"]),
    "duplicate head": ("heads", lambda r: r.append(list(r[1])), ["row 6", "duplicate key"]),
    "infinite x": ("wells", set_cell(2, "x", "inf"), ["wells.csv", "row 2", "'x'", "not finite"]),
    "out of CRS": ("wells", set_cell(3, "x", 9e9), ["wells.csv", "row 3", "'x'", "not valid in"]),
    "bad date": ("ktests", set_cell(4, "tested_on", "2024-13-45"), ["row 4", "'tested_on'", "ISO 8601"]),
    "bad time": ("heads", set_cell(2, "measured_at", "yesterday"), ["row 2", "'measured_at'", "ISO 8601"]),
    "bad role": ("units", set_cell(1, "role", "sponge"), ["units.csv", "row 1", "'role'"]),
    "head without ref": ("heads", lambda r: r.append(["W1", "P1", "2024-07-01", "", "3.0", "", ""]),
                         ["row 6", "'ref_elev'"]),
    "bad rate unit": ("pumping", None, ["pumping.csv", "row 1", "'rate_unit'"]),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_file_changes_nothing(case, mini_store, tmp_path, runner):
    kind, change, expected = CASES[case]
    if kind == "pumping":
        rows = [["well_id", "zone_id", "rate", "rate_unit", "start", "end"], ["W1", "", "5", "furlong3/fortnight", "2024-01-01", ""]]
    else:
        rows = rows_with(f"{kind}.csv", change)
    path = write_csv(tmp_path / f"{kind}.csv", rows)
    refuse(runner, mini_store, kind, path, *expected)


def test_empty_file(mini_store, tmp_path, runner):
    path = tmp_path / "zones.csv"
    path.write_bytes(b"")
    refuse(runner, mini_store, "zones", path, "zones.csv", "empty")
    path.write_text("well_id,zone_id,top_depth,bottom_depth\n")
    refuse(runner, mini_store, "zones", path, "zones.csv", "no data rows")


def test_not_utf8(mini_store, tmp_path, runner):
    path = tmp_path / "wells.csv"
    path.write_bytes("well_id,x,y,ground_elev,name\nW9,610000,4100000,300,Müller\n".encode("latin-1"))
    refuse(runner, mini_store, "wells", path, "wells.csv", "row 1", "UTF-8")


def test_semicolon_delimited(mini_store, tmp_path, runner):
    path = tmp_path / "wells.csv"
    path.write_text("well_id;x;y;ground_elev\nW9;610000;4100000;300\n")
    refuse(runner, mini_store, "wells", path, "wells.csv", "header", "semicolon")


def test_ragged_row(mini_store, tmp_path, runner):
    path = tmp_path / "wells.csv"
    path.write_text("well_id,x,y,ground_elev\nW9,610000,4100000,300\nW10,1,2,3,4,5\n")
    refuse(runner, mini_store, "wells", path, "wells.csv", "row 2")


def test_not_a_store(tmp_path, runner, mini_files):
    text = tmp_path / "notes.gpkg"
    text.write_text("hello")
    res = cli(runner, "import", text, "units", mini_files / "units.csv")
    assert res.exit_code == 2 and "not a hydroatlas store" in res.output
    plain = tmp_path / "plain.sqlite"
    sqlite3.connect(plain).execute("CREATE TABLE t (a)").connection.close()
    res = cli(runner, "stats", plain)
    assert res.exit_code == 2 and "not a hydroatlas store" in res.output
    assert plain.read_bytes()[:16] == b"SQLite format 3\x00"
    res = cli(runner, "check", tmp_path / "missing.gpkg")
    assert res.exit_code == 2 and "does not exist" in res.output
    assert not (tmp_path / "missing.gpkg").exists()


def test_init_refuses_existing_file(empty_store, runner, tmp_path):
    before = snapshot(empty_store)
    res = cli(runner, "init", empty_store, "--crs", CRS)
    assert res.exit_code == 2 and "already exists" in res.output
    assert snapshot(empty_store) == before
    res = cli(runner, "init", tmp_path / "x.gpkg", "--crs", "EPSG:999999")
    assert res.exit_code == 2


def test_reimport_adds_no_duplicates(mini_store, mini_files, runner):
    before = snapshot(mini_store)
    for kind in ("units", "wells", "picks", "zones", "ktests", "heads"):
        res = cli(runner, "import", mini_store, kind, mini_files / f"{kind}.csv")
        assert res.exit_code == 0 and "0 new, 0 updated" in res.output, res.output
    after = snapshot(mini_store)
    for table in before:
        if table not in ("imports", "gpkg_contents"):
            assert after[table] == before[table], table
    assert len(after["imports"]) == len(before["imports"]) + 6


def test_reimport_with_changed_value_updates_and_reports(mini_store, tmp_path, runner):
    path = write_csv(tmp_path / "wells.csv", rows_with("wells.csv", set_cell(2, "ground_elev", 311)))
    res = cli(runner, "import", mini_store, "wells", path)
    assert res.exit_code == 0 and "0 new, 1 updated, 3 unchanged" in res.output
    with open_store(mini_store) as s:
        wells = s.read("wells").set_index("well_id")
    assert wells.loc["W2", "ground_elev"] == 311 and wells.loc["W2", "source_row"] == 2
    assert len(wells) == 4


def _heads_rows(days=28):
    return [MINI["heads.csv"][0]] + [["W1", "P1", f"2025-01-{d:02d}T00:00:00", 290 + d, "", "", ""]
                                     for d in range(1, days + 1)]


def test_failure_after_rows_were_written_rolls_back(mini_store, tmp_path, monkeypatch):
    """Simulated fault once every row of the file is in its table (logging the import fails): nothing remains."""
    path = write_csv(tmp_path / "heads.csv", _heads_rows())
    before = snapshot(mini_store)
    seen = {}

    def failing_log(self, kind, file, sha256, result):
        seen["rows"] = self.count("heads")  # inside the transaction: the rows are there
        raise RuntimeError("simulated failure after the rows were written")

    with open_store(mini_store) as s, pytest.raises(RuntimeError, match="simulated"):
        monkeypatch.setattr(type(s), "log_import", failing_log)
        import_file(s, "heads", path)
    assert seen["rows"] == len(before["heads"]) + 28
    assert snapshot(mini_store) == before


def test_failure_midway_rolls_back(gpkg_mini_store, tmp_path, monkeypatch):
    """Simulated fault after the first chunk of rows was written: the whole file is rolled back."""
    mini_store = gpkg_mini_store
    path = write_csv(tmp_path / "heads.csv", _heads_rows())
    before = snapshot(mini_store)
    calls = {"n": 0}
    original = geopackage.GeoPackageStore._execute_chunk

    def flaky(self, sql, chunk):
        calls["n"] += 1
        if calls["n"] == 2:
            raise RuntimeError("simulated disk failure")
        return original(self, sql, chunk)

    monkeypatch.setattr(geopackage, "CHUNK_ROWS", 5)
    monkeypatch.setattr(geopackage.GeoPackageStore, "_execute_chunk", flaky)
    with open_store(mini_store) as s, pytest.raises(RuntimeError, match="simulated"):
        import_file(s, "heads", path)
    assert calls["n"] == 2
    assert snapshot(mini_store) == before


def test_heads_from_depth_to_water(mini_store):
    with open_store(mini_store) as s:
        heads = s.read("heads").set_index(["well_id", "zone_id"])
    assert heads.loc[("W2", "S1"), "head"] == pytest.approx(310.5 - 12.5)
    assert heads.loc[("W2", "S1"), "measured_at"] == "2024-06-01T10:00:00"
    assert heads.loc[("W3", "S1"), "measured_at"] == "2024-06-01T00:00:00"


def test_inconsistent_head_refused(mini_store, tmp_path, runner):
    rows = [MINI["heads.csv"][0], ["W2", "S1", "2024-07-01", "300", "12.5", "310.5", ""]]
    refuse(runner, mini_store, "heads", write_csv(tmp_path / "heads.csv", rows), "row 1", "'head'", "disagrees")


def test_k_units_stored_exactly(mini_store):
    with open_store(mini_store) as s:
        k = s.read("ktests").set_index(["well_id", "zone_id", "tested_on"])
    assert k.loc[("W1", "P3", "2024-05-04"), "k_ms"] == pytest.approx(10 * 0.3048 / 86400, rel=1e-15)
    assert k.loc[("W1", "P3", "2024-05-04"), "k"] == 10.0 and k.loc[("W1", "P3", "2024-05-04"), "k_unit"] == "ft/d"
    assert k.loc[("W2", "S2", "2024-05-06"), "k_ms"] == pytest.approx(1e-5, rel=1e-15)


def test_input_crs_reprojects(empty_store, tmp_path, runner, mini_files):
    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    lon, lat = tr.transform(610000.0, 4100000.0)
    cli(runner, "import", empty_store, "units", mini_files / "units.csv")
    path = write_csv(tmp_path / "wells.csv", [["well_id", "x", "y", "ground_elev", "owner"],
                                              ["G1", repr(lon), repr(lat), 300, "county"]])
    res = cli(runner, "import", empty_store, "wells", path, "--input-crs", "EPSG:4326")
    assert res.exit_code == 0, res.output
    with open_store(empty_store) as s:
        w = s.read("wells").iloc[0]
    assert w.x == pytest.approx(610000.0, abs=1e-3) and w.y == pytest.approx(4100000.0, abs=1e-3)
    assert (w.x_input, w.y_input) == (lon, lat) and w.input_crs == "EPSG:4326"
    assert '"owner": "county"' in w["attrs"]  # extra columns are kept
    res = cli(runner, "import", empty_store, "wells", path, "--input-crs", "NOT-A-CRS")
    assert res.exit_code == 2 and "--input-crs" in res.output


def test_areas_from_geojson(mini_store, tmp_path, runner):
    import json

    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    square = [(610000, 4100000), (611000, 4100000), (611000, 4101000), (610000, 4101000), (610000, 4100000)]
    ring = [list(tr.transform(x, y)) for x, y in square]
    fc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"area_id": "R1", "kind": "recharge", "unit": "TOP"},
         "geometry": {"type": "Polygon", "coordinates": [ring]}}]}
    path = tmp_path / "areas.geojson"
    path.write_text(json.dumps(fc))
    res = cli(runner, "import", mini_store, "areas", path)
    assert res.exit_code == 0, res.output
    with open_store(mini_store) as s:
        areas = s.read_geometries("areas")
    assert areas.geometry.iloc[0].area == pytest.approx(1e6, rel=1e-6)
    fc["features"][0]["properties"]["kind"] = "lake"
    path.write_text(json.dumps(fc))
    refuse(runner, mini_store, "areas", path, "areas.geojson", "row 1", "'kind'")
    fc["features"][0]["properties"]["kind"] = "recharge"
    fc["features"][0]["geometry"] = {"type": "Point", "coordinates": ring[0]}
    path.write_text(json.dumps(fc))
    refuse(runner, mini_store, "areas", path, "row 1", "polygon")


def test_api_error_carries_location(mini_store, tmp_path):
    path = write_csv(tmp_path / "zones.csv", rows_with("zones.csv", set_cell(3, "top_depth", "x")))
    with open_store(mini_store) as s, pytest.raises(ImportDataError) as info:
        import_file(s, "zones", path)
    assert (info.value.file, info.value.row, info.value.column) == ("zones.csv", 3, "top_depth")
    assert isinstance(info.value, ValueError)


def test_pumping_springs_discharge(mini_store, tmp_path, runner):
    p = write_csv(tmp_path / "pumping.csv", [["well_id", "zone_id", "rate", "rate_unit", "start", "end"],
                                             ["W1", "P3", "100", "gpm", "2024-01-01", "2024-12-31"],
                                             ["W2", "", "5", "L/s", "2024-01-01", ""]])
    assert cli(runner, "import", mini_store, "pumping", p).exit_code == 0
    sp = write_csv(tmp_path / "springs.csv", [["spring_id", "x", "y", "elev", "name"],
                                              ["S1", 610500, 4100500, 260, "Test spring"]])
    assert cli(runner, "import", mini_store, "springs", sp).exit_code == 0
    d = write_csv(tmp_path / "discharge.csv", [["spring_id", "measured_at", "discharge", "rate_unit"],
                                               ["S1", "2024-03-01", "2", "ft3/d"]])
    assert cli(runner, "import", mini_store, "discharge", d).exit_code == 0
    with open_store(mini_store) as s:
        pumping = s.read("pumping").set_index("well_id")
        assert pumping.loc["W1", "rate_m3d"] == pytest.approx(100 * 3.785411784e-3 * 1440)
        assert pumping.loc["W2", "rate_m3d"] == pytest.approx(5 * 86.4)
        assert s.read("discharge").iloc[0].discharge_m3d == pytest.approx(2 * 0.3048**3)
    bad = write_csv(tmp_path / "discharge2.csv", [["spring_id", "measured_at", "discharge", "rate_unit"],
                                                  ["S9", "2024-03-01", "2", "m3/d"]])
    refuse(runner, mini_store, "discharge", bad, "row 1", "'spring_id'", "S9")
    bad = write_csv(tmp_path / "pumping2.csv", [["well_id", "zone_id", "rate", "rate_unit", "start", "end"],
                                                ["W1", "", "1", "m3/d", "2024-05-01", "2024-01-01"]])
    refuse(runner, mini_store, "pumping", bad, "row 1", "'end'", "before start")
