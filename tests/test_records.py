"""Records are safe: strict CSV reading, stable keys, corrections with history, retirement, schema versions.

Every refused input is checked through the CLI for exit code 2, one message line naming file, row and
column, and a store unchanged table by table (history included). The tests run on both backends (the
GeoPackage and PostGIS, conftest.py: store_backend) except those about the GeoPackage file (`gpkg_*` fixtures).
"""

from __future__ import annotations

import json
import sqlite3
import unicodedata

import pandas as pd
import pytest

from hydroatlas import open_store
from hydroatlas.store.gpkg_sql import register_functions
from hydroatlas.store.schema import SCHEMA_VERSION

from conftest import CRS, cli, write_csv
from test_importers import refuse, snapshot


@pytest.fixture
def empty_store(any_empty_store):
    return any_empty_store


@pytest.fixture
def mini_store(any_mini_store):
    return any_mini_store


def _is_url(store) -> bool:
    return isinstance(store, str) and store.startswith("postgresql://")


def direct_sql(store, *statements, query: str | None = None):
    """Run SQL on the store's database as another program would (a desktop GIS, psql), outside hydroatlas;
    return the rows of ``query`` when given."""
    if _is_url(store):
        import psycopg

        with psycopg.connect(store) as conn:  # one transaction, committed on leaving
            for sql in statements:
                conn.execute(sql)
            return conn.execute(query).fetchall() if query else None
    conn = sqlite3.connect(store)
    register_functions(conn)  # as a GIS does: the spatial-index triggers call the GeoPackage SQL functions
    try:
        for sql in statements:
            conn.execute(sql)
        conn.commit()
        return conn.execute(query).fetchall() if query else None
    finally:
        conn.close()


def write_text(path, text: str):
    path.write_bytes(text.encode("utf-8"))
    return path


def stats_json(runner, store):
    res = cli(runner, "stats", store, "--format", "json", "--per", "test")
    assert res.exit_code == 0, res.output
    return {r["unit"]: r for r in json.loads(res.stdout)}


# -- strict CSV ------------------------------------------------------------------
def test_row_with_one_field_too_many_is_refused(mini_store, tmp_path, runner):
    # an unquoted comma in the name: pandas alone would take the first column as the index and shift every column
    path = write_text(tmp_path / "wells.csv", "well_id,x,y,ground_elev,total_depth,kind,name\n"
                      "W9,610500,4100500,300,100,monitoring,Smith, east\n")
    refuse(runner, mini_store, "wells", path, "wells.csv", "row 1", "8 fields", "header's 7")


def test_every_row_too_long_is_refused(mini_store, tmp_path, runner):
    path = write_text(tmp_path / "wells.csv", "well_id,x,y,ground_elev\n"
                      "W8,610500,4100500,300,extra\nW9,610600,4100500,300,extra\n")
    refuse(runner, mini_store, "wells", path, "row 1", "5 fields")


def test_row_with_too_few_fields_is_refused(mini_store, tmp_path, runner):
    path = write_text(tmp_path / "wells.csv", "well_id,x,y,ground_elev,total_depth\n"
                      "W8,610500,4100500,300,50\nW9,610600,4100500\n")
    refuse(runner, mini_store, "wells", path, "row 2", "3 fields", "fewer")


def test_repeated_header_is_refused(mini_store, tmp_path, runner):
    path = write_text(tmp_path / "wells.csv", "well_id,x,y,ground_elev,name,name\nW9,610500,4100500,300,a,b\n")
    refuse(runner, mini_store, "wells", path, "header", "repeats", "'name'")


def test_nul_byte_is_refused(mini_store, tmp_path, runner):
    path = write_text(tmp_path / "wells.csv", "well_id,x,y,ground_elev\nW9,610500,4100500,300\nW\x008,1,2,3\n")
    refuse(runner, mini_store, "wells", path, "NUL byte", "row 2")


@pytest.mark.parametrize("padded", ['" W1 "', "\u00a0W1\u00a0", "W1\u2003", '"W1\t"'])
def test_padded_ids_are_the_same_id(mini_store, tmp_path, runner, padded):
    path = write_text(tmp_path / "wells.csv", f"well_id,x,y,ground_elev,total_depth,kind,name\n"
                      f"{padded},610000,4100000,300,120,multizone,North\n")
    res = cli(runner, "import", mini_store, "wells", path)
    assert res.exit_code == 0, res.output
    assert "0 new" in res.output and "1 unchanged" in res.output
    with open_store(mini_store) as s:
        assert sorted(s.read("wells")["well_id"]) == ["W1", "W2", "W3", "W4"]


def test_unicode_forms_are_one_id(empty_store, tmp_path, runner):
    composed = unicodedata.normalize("NFC", "Pu\u00e9blo-1")
    decomposed = unicodedata.normalize("NFD", composed)
    assert composed != decomposed
    for i, name in enumerate((composed, decomposed)):
        path = write_text(tmp_path / f"w{i}.csv", f"well_id,x,y,ground_elev\n{name},610000,4100000,300\n")
        assert cli(runner, "import", empty_store, "wells", path).exit_code == 0
    with open_store(empty_store) as s:
        assert list(s.read("wells")["well_id"]) == [composed]


@pytest.mark.parametrize("code", ["../../x", "/abs/path", ".hidden", "a/b", "C:\\x", "a b", "x" * 65])
def test_unit_codes_that_could_name_paths_are_refused(empty_store, tmp_path, runner, code):
    path = write_csv(tmp_path / "units.csv", [["code", "name", "rank", "role"], [code, "n", 1, "aquifer"]])
    refuse(runner, empty_store, "units", path, "units.csv", "row 1", "'code'", "not allowed")


def test_absurd_rank_is_refused(empty_store, tmp_path, runner):
    path = write_csv(tmp_path / "units.csv", [["code", "name", "rank", "role"], ["A", "n", "1e20", "aquifer"]])
    refuse(runner, empty_store, "units", path, "row 1", "'rank'", "at most")


@pytest.mark.parametrize("stamp", ["2024", "2024-06", "20240601x"])
def test_bare_year_or_month_is_not_a_date(mini_store, tmp_path, runner, stamp):
    path = write_csv(tmp_path / "heads.csv", [["well_id", "zone_id", "measured_at", "head"],
                                              ["W1", "P1", "2024-07-01", 289], ["W1", "P1", stamp, 288]])
    refuse(runner, mini_store, "heads", path, "row 2", "'measured_at'", "not an ISO 8601")


# -- stable keys and corrections ------------------------------------------------
KTEST_HEADER = ["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]


def test_k_resaved_by_a_spreadsheet_is_the_same_test(mini_store, tmp_path, runner):
    first = write_csv(tmp_path / "k1.csv", [KTEST_HEADER, ["W4", "S1", "2024-07-01", "slug", "0.7358", "m/d"]])
    resaved = write_csv(tmp_path / "k2.csv", [KTEST_HEADER, ["W4", "S1", "2024-07-01", "slug", "7.358e-01", "m/d"]])
    assert "1 new" in cli(runner, "import", mini_store, "ktests", first).output
    res = cli(runner, "import", mini_store, "ktests", resaved)
    assert res.exit_code == 0 and "0 new, 0 updated, 1 unchanged" in res.output, res.output
    with open_store(mini_store) as s:
        assert len(s.read("ktests")) == len(s.read("ktests", include_retired=True)) == 9


def test_corrected_value_updates_and_keeps_history(mini_store, tmp_path, runner):
    wrong = write_csv(tmp_path / "k1.csv", [KTEST_HEADER, ["W4", "S1", "2024-07-01", "slug", "73.58", "m/d"]])
    fixed = write_csv(tmp_path / "k2.csv", [KTEST_HEADER, ["W4", "S1", "2024-07-01", "slug", "0.7358", "m/d"]])
    cli(runner, "import", mini_store, "ktests", wrong)
    before = stats_json(runner, mini_store)["TOP"]
    res = cli(runner, "import", mini_store, "ktests", fixed)
    assert "0 new, 1 updated" in res.output, res.output
    after = stats_json(runner, mini_store)["TOP"]
    assert after["n_tests"] == before["n_tests"] and after["k_max"] < before["k_max"]
    res = cli(runner, "history", mini_store, "ktests", "W4/S1/slug@2024-07-01", "--format", "json")
    assert res.exit_code == 0, res.output
    versions = json.loads(res.stdout)
    assert [v["k"] for v in versions] == [73.58, 0.7358]
    assert versions[0]["source_file"] == "k1.csv" and versions[0]["replaced_by_file"] == "k2.csv"
    assert versions[0]["replaced_by"] == "update" and versions[-1]["replaced_at"] is None


def test_two_tests_same_day_without_test_id_are_refused(mini_store, tmp_path, runner):
    path = write_csv(tmp_path / "k.csv", [KTEST_HEADER, ["W4", "S1", "2024-07-01", "slug", "1", "m/d"],
                                          ["W4", "S1", "2024-07-01", "slug", "2", "m/d"]])
    refuse(runner, mini_store, "ktests", path, "row 2", "duplicate key", "test_id")


def test_optional_columns_left_out_keep_stored_values(mini_store, tmp_path, runner):
    rich = write_csv(tmp_path / "w1.csv", [["well_id", "x", "y", "ground_elev", "total_depth", "kind", "name", "owner"],
                                          ["W1", 610000, 4100000, 300, 120, "multizone", "North", "district"]])
    assert cli(runner, "import", mini_store, "wells", rich).exit_code == 0
    bare = write_csv(tmp_path / "w2.csv", [["well_id", "x", "y", "ground_elev"], ["W1", 610000, 4100000, 300.5]])
    res = cli(runner, "import", mini_store, "wells", bare)
    assert "1 updated" in res.output
    blank = write_csv(tmp_path / "w3.csv", [["well_id", "x", "y", "ground_elev", "name", "owner"],
                                           ["W1", 610000, 4100000, 300.5, "", ""]])
    assert "1 unchanged" in cli(runner, "import", mini_store, "wells", blank).output
    zones = write_csv(tmp_path / "z.csv", [["well_id", "zone_id", "top_depth", "bottom_depth"], ["W3", "S1", 20, 31]])
    assert cli(runner, "import", mini_store, "zones", zones).exit_code == 0
    with open_store(mini_store) as s:
        w = s.read("wells").set_index("well_id").loc["W1"]
        z = s.read("zones").set_index(["well_id", "zone_id"]).loc[("W3", "S1")]
    assert (w["ground_elev"], w["total_depth"], w["kind"], w["name"]) == (300.5, 120, "multizone", "North")
    assert json.loads(w["attrs"]) == {"owner": "district"}
    assert z["unit"] == "LOW" and z["bottom_depth"] == 31  # the override survives a file without the column
    res = cli(runner, "import", mini_store, "wells", blank, "--clear-empty")
    assert "1 updated" in res.output, res.output
    with open_store(mini_store) as s:
        w = s.read("wells").set_index("well_id").loc["W1"]
    assert pd.isna(w["name"]) and w["kind"] == "multizone" and json.loads(w["attrs"]) == {}


# -- retirement -------------------------------------------------------------------
def test_retire_takes_records_out_and_restore_brings_them_back(mini_store, runner):
    full = stats_json(runner, mini_store)
    res = cli(runner, "retire", mini_store, "ktests", "W1/P1/slug@2024-05-02", "--reason", "logger drift")
    assert res.exit_code == 0 and "retired 1" in res.output, res.output
    less = stats_json(runner, mini_store)
    assert less["TOP"]["n_tests"] == full["TOP"]["n_tests"] - 1
    res = cli(runner, "check", mini_store, "--json")
    retired = [f for f in json.loads(res.stdout) if f["kind"] == "retired"]
    assert len(retired) == 1 and "logger drift" in retired[0]["message"]
    assert cli(runner, "restore", mini_store, "ktests", "W1/P1/slug@2024-05-02").exit_code == 0
    assert stats_json(runner, mini_store) == full
    versions = json.loads(cli(runner, "history", mini_store, "ktests", "W1/P1/slug@2024-05-02",
                              "--format", "json").stdout)
    assert [v["replaced_by"] for v in versions] == ["retire", "restore", None]
    assert versions[0]["reason"] == "logger drift"


def test_retiring_a_well_retires_what_hangs_on_it(mini_store, runner):
    full = stats_json(runner, mini_store)
    assert cli(runner, "retire", mini_store, "wells", "W1", "--reason", "casing failure").exit_code == 0
    less = stats_json(runner, mini_store)
    assert less["TOP"]["n_wells"] == full["TOP"]["n_wells"] - 1
    with open_store(mini_store) as s:
        assert "W1" not in set(s.read("zones")["well_id"]) and "W1" not in set(s.read("heads")["well_id"])
        assert "W1" in set(s.read("zones", include_retired=True)["well_id"])


def test_retire_unknown_record_or_without_reason(mini_store, runner):
    before = snapshot(mini_store)
    res = cli(runner, "retire", mini_store, "wells", "W1", "W77", "--reason", "x")
    assert res.exit_code == 2 and "W77" in res.output
    res = cli(runner, "retire", mini_store, "wells", "W1", "--reason", "  ")
    assert res.exit_code == 2 and "reason" in res.output
    assert snapshot(mini_store) == before


def test_history_is_kept_for_direct_edits(mini_store):
    """A desktop GIS (or psql) writing to the store's tables goes through the same triggers, which write the same
    history rows on both backends (compact JSON keys and versions, as SQLite's json functions write them)."""
    rows = direct_sql(mini_store, "UPDATE wells SET ground_elev = 299 WHERE well_id = 'W2'",
                      "DELETE FROM heads WHERE well_id = 'W3'",
                      query="SELECT table_name, record_key, action, old_version FROM record_history ORDER BY fid")
    assert ("wells", '["W2"]', "update") == rows[0][:3] and json.loads(rows[0][3])["ground_elev"] == 310
    assert rows[0][3].startswith('{"well_id":"W2","x":612000.0,"y":4100000.0,"ground_elev":310.0,')
    assert rows[1][:3] == ("heads", '["W3","S1","2024-06-01T00:00:00"]', "delete")


# -- coordinates and areas ---------------------------------------------------------
def test_degrees_given_as_metres_are_refused(mini_store, tmp_path, runner):
    path = write_csv(tmp_path / "w.csv", [["well_id", "x", "y", "ground_elev"], ["W9", -85.61, 37.02, 300]])
    refuse(runner, mini_store, "wells", path, "row 1", "'x'", "longitude/latitude", "--input-crs EPSG:4326")


def test_swapped_lat_lon_is_refused(mini_store, tmp_path, runner):
    path = write_csv(tmp_path / "w.csv", [["well_id", "x", "y", "ground_elev"], ["W9", 37.02, -85.61, 300]])
    before = snapshot(mini_store)
    res = cli(runner, "import", mini_store, "wells", path, "--input-crs", "EPSG:4326")
    assert res.exit_code == 2 and "row 1" in res.output and "area of use" in res.output, res.output
    assert snapshot(mini_store) == before


def test_point_just_outside_the_area_of_use_is_refused(mini_store, tmp_path, runner):
    # UTM zone 16N is defined for longitudes -90 to -84 (EPSG registry); -90.3 lies outside with no slack
    path = write_csv(tmp_path / "w.csv", [["well_id", "x", "y", "ground_elev"], ["W9", -90.3, 37.0, 300]])
    before = snapshot(mini_store)
    res = cli(runner, "import", mini_store, "wells", path, "--input-crs", "EPSG:4326")
    assert res.exit_code == 2 and "falls outside" in res.output, res.output
    assert snapshot(mini_store) == before


def _area_file(tmp_path, name, ring, area_id="D1", kind="domain"):
    fc = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {"area_id": area_id,
          "kind": kind}, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}
    path = tmp_path / name
    path.write_text(json.dumps(fc))
    return path


def _lonlat(points):
    from pyproj import Transformer

    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    return [list(tr.transform(x, y)) for x, y in points]


def test_polygon_without_area_is_refused_and_domain_replacement_is_said(mini_store, tmp_path, runner):
    good = _lonlat([(609000, 4099000), (613000, 4099000), (613000, 4103000), (609000, 4103000), (609000, 4099000)])
    assert cli(runner, "import", mini_store, "areas", _area_file(tmp_path, "a.geojson", good)).exit_code == 0
    flat = _lonlat([(609000, 4099000), (613000, 4099000), (609000, 4099000)])
    refuse(runner, mini_store, "areas", _area_file(tmp_path, "flat.geojson", flat), "flat.geojson", "row 1",
           "'geometry'", "no area")
    smaller = _lonlat([(610000, 4099000), (613000, 4099000), (613000, 4103000), (610000, 4099000)])
    res = cli(runner, "import", mini_store, "areas", _area_file(tmp_path, "b.geojson", smaller))
    assert res.exit_code == 0 and "note: domain D1 replaces" in res.output, res.output
    res = cli(runner, "import", mini_store, "areas", _area_file(tmp_path, "c.geojson", smaller, area_id="D2"))
    assert "2 domain polygons" in res.output, res.output


# -- schema versions ---------------------------------------------------------------
def _set_version(store, version):
    direct_sql(store, f"UPDATE hydroatlas_settings SET value = '{version}' WHERE key = 'schema_version'")


def _raw(store):
    """The file's bytes (GeoPackage) or every row of every table (PostGIS, read past the version check)."""
    if not _is_url(store):
        return store.read_bytes()
    return {t: direct_sql(store, query=f'SELECT * FROM "{t}" ORDER BY 1')
            for t in ("hydroatlas_settings", "wells", "imports", "record_history")}


def test_newer_schema_is_refused(mini_store, tmp_path, runner, mini_files):
    _set_version(mini_store, "99")
    raw = _raw(mini_store)
    for args in (("stats", mini_store), ("import", mini_store, "wells", mini_files / "wells.csv")):
        res = cli(runner, *args)
        assert res.exit_code == 2 and "schema version 99" in res.output and "newer" in res.output, res.output
    assert cli(runner, "upgrade", mini_store).exit_code == 2
    assert _raw(mini_store) == raw


def _make_version_1(path):
    """Turn a current store into what release 1 wrote: no lifecycle columns, no history, value-based test ids."""
    conn = sqlite3.connect(path)
    conn.execute("BEGIN")
    for (name,) in conn.execute("SELECT name FROM sqlite_master WHERE type='trigger' AND name LIKE "
                                "'%keep_history%'").fetchall():
        conn.execute(f'DROP TRIGGER "{name}"')
    conn.execute("DROP TABLE record_history")
    conn.execute("DELETE FROM gpkg_contents WHERE table_name='record_history'")
    for (table,) in conn.execute("SELECT DISTINCT m.name FROM sqlite_master m, pragma_table_info(m.name) p "
                                 "WHERE m.type='table' AND p.name='retired_at'").fetchall():
        conn.execute(f'ALTER TABLE "{table}" DROP COLUMN retired_at')
        conn.execute(f'ALTER TABLE "{table}" DROP COLUMN retired_reason')
    conn.execute("UPDATE ktests SET test_id = tested_on || '|' || method || '|' || k || '|' || k_unit")
    conn.execute("UPDATE hydroatlas_settings SET value = '1' WHERE key = 'schema_version'")
    conn.execute("COMMIT")
    conn.close()


def test_older_schema_asks_for_upgrade_and_upgrade_migrates(gpkg_mini_store, runner):
    mini_store = gpkg_mini_store
    _make_version_1(mini_store)
    res = cli(runner, "stats", mini_store)
    assert res.exit_code == 2 and "hydroatlas upgrade" in res.output, res.output
    res = cli(runner, "upgrade", mini_store)
    assert res.exit_code == 0 and f"upgraded to {SCHEMA_VERSION}" in res.output, res.output
    with open_store(mini_store) as s:
        ids = set(s.read("ktests")["test_id"])
    assert "slug@2024-05-01" in ids and not any("|" in i for i in ids)
    res = cli(runner, "history", mini_store, "ktests", "W1/P1/slug@2024-05-01", "--format", "json")
    assert json.loads(res.output)[0]["test_id"] == "2024-05-01|slug|2.0|m/d"  # the old key kept
    assert cli(runner, "retire", mini_store, "wells", "W2", "--reason", "x").exit_code == 0
    assert "is current" in cli(runner, "upgrade", mini_store).output


def test_check_finds_a_well_moved_in_a_gis(mini_store, runner):
    """x, y feed the computations; a geometry moved by a GIS that no longer agrees is an error finding."""
    import struct

    if _is_url(mini_store):  # PostGIS: as a GIS editing the layer writes it
        direct_sql(mini_store, "UPDATE wells SET geom = ST_SetSRID(ST_MakePoint(610250, 4102000), 32616) "
                               "WHERE well_id = 'W3'")
    else:
        blob = direct_sql(mini_store, query="SELECT geom FROM wells WHERE well_id = 'W3'")[0][0]
        moved = blob[:8] + blob[8:13] + struct.pack("<2d", 610250.0, 4102000.0)  # point WKB: header 5 bytes, x, y
        direct_sql(mini_store, "UPDATE wells SET geom = X'" + moved.hex() + "' WHERE well_id = 'W3'")
    found = [f for f in json.loads(cli(runner, "check", mini_store, "--json").stdout)
             if f["kind"] == "geometry_mismatch"]
    assert len(found) == 1 and found[0]["well_id"] == "W3" and "610250" in found[0]["message"]
