"""The store on PostgreSQL/PostGIS (issue 15): the schema, GDAL reading it, `hydroatlas copy`, statistics in SQL.

The store suite itself runs on both backends through one parametrised fixture (conftest.py: store_backend;
tests/test_store.py, test_importers.py, test_records.py, test_store_units.py, test_store_locks.py). This module
holds what only a server store has. A throwaway PostgreSQL cluster is started once per session
(tests/pg_server.py).

References: GDAL's PostgreSQL driver (Debian's ogr2ogr/ogrinfo, or pyogrio where its GDAL has the driver) reads
the layers and their SRID; PostGIS's own catalogue (geometry_columns) and PostgreSQL's (information_schema,
pg_indexes); Python's `statistics` module recomputes the unit statistics from the raw values.
"""

from __future__ import annotations

import json
import math
import shutil
import sqlite3
import statistics
import subprocess
from pathlib import Path

import numpy as np
import pyogrio
import pytest
from pyproj import CRS as PCRS

from hydroatlas import open_store, workflows
from hydroatlas.errors import NotAStoreError, StoreError
from hydroatlas.selection import SelectionPolicy
from hydroatlas.store import create_store
from hydroatlas.store.copying import SETTINGS_TABLE, dump_table, settings_rows
from hydroatlas.store.schema import TABLES

from conftest import CRS, MINI, cli, fill_mini, init_store, require_all, write_csv
from truth_fixtures import copy_store as copy_file

psycopg = pytest.importorskip("psycopg") if not require_all() else __import__("psycopg")


@pytest.fixture
def pg_mini(pg_database, mini_files, runner):
    """The MINI district in a PostGIS store, through the command line."""
    return fill_mini(init_store(pg_database, runner), mini_files, runner)


def _libpq(url: str) -> str:
    """A GDAL ``PG:`` connection string for a postgresql:// URL."""
    from urllib.parse import urlsplit

    u = urlsplit(url)
    return f"PG:host={u.hostname} port={u.port} dbname={u.path.lstrip('/')} user={u.username}"


def _square_lonlat(x0, y0, size):
    from pyproj import Transformer

    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    ring = [(x0, y0), (x0 + size, y0), (x0 + size, y0 + size), (x0, y0 + size), (x0, y0)]
    return [list(tr.transform(x, y)) for x, y in ring]


def _add_spring_and_area(store, tmp_path, runner):
    sp = write_csv(tmp_path / "springs.csv", [["spring_id", "x", "y", "elev", "name"],
                                              ["S1", 610500, 4100500, 260, "Test spring"]])
    assert cli(runner, "import", store, "springs", sp).exit_code == 0
    fc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"area_id": "R1", "kind": "recharge", "unit": "TOP", "note": "Été"},
         "geometry": {"type": "Polygon", "coordinates": [_square_lonlat(610000, 4100000, 1000)]}}]}
    path = tmp_path / "areas.geojson"
    path.write_text(json.dumps(fc), encoding="utf-8")
    res = cli(runner, "import", store, "areas", path)
    assert res.exit_code == 0, res.output


# -- the schema -----------------------------------------------------------------------------------------------------
def test_schema_matches_the_geopackage(pg_mini, gpkg_mini_store):
    """Every table has the same columns in the same order on both backends; geometry columns are PostGIS
    geometry(Point|MultiPolygon) in the store's SRID with a GiST index (PostGIS geometry_columns, pg_indexes)."""
    con = sqlite3.connect(gpkg_mini_store)
    with psycopg.connect(pg_mini) as pg:
        for name, spec in TABLES.items():
            gpkg_cols = [r[1] for r in con.execute(f'PRAGMA table_info("{name}")')]
            pg_cols = [r[0] for r in pg.execute("SELECT column_name FROM information_schema.columns WHERE "
                                                "table_name = %s ORDER BY ordinal_position", (name,))]
            assert pg_cols == gpkg_cols, name
        geo = {r[0]: (r[1], r[2]) for r in pg.execute(
            "SELECT f_table_name, type, srid FROM geometry_columns WHERE f_table_schema = current_schema()")}
        assert geo == {"wells": ("POINT", 32616), "springs": ("POINT", 32616), "areas": ("MULTIPOLYGON", 32616)}
        gist = {r[0] for r in pg.execute("SELECT tablename FROM pg_indexes WHERE indexdef LIKE '%USING gist%'")}
        assert {"wells", "springs", "areas"} <= gist
        # the schema itself refuses orphans and impossible intervals, not only the importer
        with pytest.raises(psycopg.errors.ForeignKeyViolation):
            pg.execute("INSERT INTO ktests (well_id, zone_id, test_id, tested_on, method, k, k_unit, k_ms, "
                       "source_file, source_row) VALUES ('W1','NOPE','t','2024-01-01','slug',1,'m/s',1,'f',1)")
    with psycopg.connect(pg_mini) as pg, pytest.raises(psycopg.errors.CheckViolation):
        pg.execute("INSERT INTO picks (well_id, unit, top_depth, bottom_depth, source_file, source_row) "
                   "VALUES ('W1','TOP',10,5,'f',1)")
    con.close()


def test_layers_read_back_through_gdal(pg_mini, tmp_path, runner):
    """GDAL's PostgreSQL driver reads wells, springs and areas as layers with the store's SRID and the exact
    coordinates. pyogrio's wheels carry no PostgreSQL driver, so when pyogrio lacks it GDAL's ogr2ogr (Debian
    gdal-bin) reads the PG: layers into a GeoPackage that pyogrio then opens."""
    _add_spring_and_area(pg_mini, tmp_path, runner)
    pg = _libpq(pg_mini)
    layers = ["wells", "springs", "areas", "zones"]
    if "PostgreSQL" in pyogrio.list_drivers():
        frames = {name: pyogrio.read_dataframe(pg, layer=name) for name in layers}
        crs = {name: pyogrio.read_info(pg, layer=name)["crs"] for name in layers[:3]}
    else:
        ogr2ogr = shutil.which("ogr2ogr")
        if ogr2ogr is None:
            if require_all():
                pytest.fail("GDAL's ogr2ogr is not installed (Debian gdal-bin; .ci/run installs it)")
            pytest.skip("neither pyogrio's GDAL nor an ogr2ogr has the PostgreSQL driver")
        out = tmp_path / "through_gdal.gpkg"
        res = subprocess.run([ogr2ogr, "-f", "GPKG", str(out), pg, *layers], capture_output=True, text=True)
        assert res.returncode == 0, res.stderr
        info = subprocess.run([shutil.which("ogrinfo"), "-so", pg, "wells"], capture_output=True, text=True)
        assert info.returncode == 0 and "Geometry: Point" in info.stdout and "Feature Count: 4" in info.stdout
        frames = {name: pyogrio.read_dataframe(out, layer=name) for name in layers}
        crs = {name: pyogrio.read_info(out, layer=name)["crs"] for name in layers[:3]}
    for name in layers[:3]:
        assert PCRS.from_user_input(crs[name]) == PCRS.from_user_input(CRS), name
    wells = frames["wells"]
    expected = {r[0]: (float(r[1]), float(r[2])) for r in MINI["wells.csv"][1:]}
    assert {w: (g.x, g.y) for w, g in zip(wells["well_id"], wells.geometry)} == expected
    assert frames["springs"].geometry.iloc[0].coords[0] == (610500.0, 4100500.0)
    with open_store(pg_mini) as s:
        area = s.read_geometries("areas").geometry.iloc[0]
    assert frames["areas"].geometry.iloc[0].equals_exact(area, 0.0) and area.geom_type == "MultiPolygon"
    assert area.area == pytest.approx(1e6, rel=1e-6)
    assert sorted(frames["zones"]["zone_id"]) == sorted(r[1] for r in MINI["zones.csv"][1:])


def test_custom_crs_without_epsg_code(pg_database, tmp_path, runner):
    """A store CRS with no EPSG code gets a user SRID in PostGIS; points keep their coordinates through a copy
    to a GeoPackage and back."""
    crs = PCRS.from_proj4("+proj=tmerc +lat_0=36 +lon_0=-87 +k=0.9996 +x_0=500000 +y_0=0 +datum=WGS84 +units=m")
    assert crs.to_epsg() is None
    create_store(pg_database, crs=crs).close()
    units = write_csv(tmp_path / "u.csv", [["code", "name", "rank", "role"], ["A", "a", 1, "aquifer"]])
    wells = write_csv(tmp_path / "w.csv", [["well_id", "x", "y", "ground_elev"], ["K1", 512345.25, 200123.5, 100]])
    for kind, path in (("units", units), ("wells", wells)):
        res = cli(runner, "import", pg_database, kind, path)
        assert res.exit_code == 0, res.output
    with open_store(pg_database) as s:
        assert s.srid == 990001 and s.settings.crs == crs
        assert s.read_geometries("wells").geometry.iloc[0].coords[0] == (512345.25, 200123.5)
    back = tmp_path / "back.gpkg"
    assert cli(runner, "copy", pg_database, back).exit_code == 0
    with open_store(back) as s:
        assert s.settings.crs == crs
        assert s.read_geometries("wells").geometry.iloc[0].coords[0] == (512345.25, 200123.5)


# -- copy -----------------------------------------------------------------------------------------------------------
def _dump(location) -> dict:
    with open_store(location) as s:
        out = {t: dump_table(s, t) for t in TABLES}
        out[SETTINGS_TABLE] = settings_rows(s)
    return out


def test_copy_round_trip_is_lossless(truth, truth_store, pg_database, tmp_path, runner):
    """GeoPackage -> PostGIS -> GeoPackage: every table equal row by row (fid, geometry WKB, every column,
    retirement), the record history, import log, product registry and settings included; the statistics and
    the product freshness equal."""
    from hydroatlas import products

    src = copy_file(truth_store, tmp_path / "src.gpkg")
    assert {"springs", "areas"} <= set(truth.import_order)  # every table with rows, the three layers included
    with open_store(src) as s:
        wells = list(s.read("wells")["well_id"][:2])
        tests = s.read("ktests").iloc[0]
    # a history: a retired and restored well, a retired one, a corrected K value
    assert cli(runner, "retire", src, "wells", wells[0], "--reason", "casing failure").exit_code == 0
    assert cli(runner, "restore", src, "wells", wells[0]).exit_code == 0
    assert cli(runner, "retire", src, "wells", wells[1], "--reason", "dry").exit_code == 0
    fix = write_csv(tmp_path / "fix.csv", [["well_id", "zone_id", "test_id", "tested_on", "method", "k", "k_unit"],
                                           [tests.well_id, tests.zone_id, tests.test_id, tests.tested_on,
                                            tests.method, repr(float(tests.k) * 1.5), tests.k_unit]])
    res = cli(runner, "import", src, "ktests", fix)
    assert res.exit_code == 0 and "1 updated" in res.output, res.output
    made = tmp_path / "made.txt"
    made.write_text("a product file")
    with open_store(src) as s:
        products.record_product(s, kind="figures", name="fig", files=[made], command="hydroatlas figures x")
    before = _dump(src)
    assert len(before["record_history"]) == 4 and len(before["products"]) == 1

    res = cli(runner, "copy", src, pg_database, "--format", "json")
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["rows"]["record_history"] == 4
    on_server = _dump(pg_database)
    back = tmp_path / "back.gpkg"
    assert cli(runner, "copy", pg_database, back).exit_code == 0
    after = _dump(back)
    for table in before:
        assert on_server[table] == before[table], table
        assert after[table] == before[table], table
    for where in (src, pg_database, back):
        with open_store(where) as s:
            assert not products.changed_tables(s, products.get_product(s, "fig"))  # still fresh
    stats = {w: json.loads(cli(runner, "stats", w, "--format", "json", "--per", "zone").stdout)
             for w in (src, pg_database, back)}
    assert stats[back] == stats[src]
    _assert_rows_close(stats[pg_database], stats[src])
    versions = json.loads(cli(runner, "history", pg_database, "wells", wells[0], "--format", "json").stdout)
    assert [v["replaced_by"] for v in versions] == ["retire", "restore", None]


def test_copy_refuses_an_existing_store_and_changes_nothing(pg_mini, gpkg_mini_store, runner):
    with open_store(pg_mini) as s:
        before = s.snapshot()
    raw = Path(gpkg_mini_store).read_bytes()
    res = cli(runner, "copy", gpkg_mini_store, pg_mini)
    assert res.exit_code == 2 and "already exists" in res.output and res.output.count("\n") == 1, res.output
    res = cli(runner, "copy", pg_mini, gpkg_mini_store)
    assert res.exit_code == 2 and "already exists" in res.output, res.output
    with open_store(pg_mini) as s:
        assert s.snapshot() == before
    assert Path(gpkg_mini_store).read_bytes() == raw


def test_failed_copy_leaves_no_store(gpkg_mini_store, pg_database, monkeypatch):
    from hydroatlas.store import copying

    def broken(store, table, rows):
        if table == "heads":
            raise RuntimeError("simulated failure while copying heads")
        return original(store, table, rows)

    original = copying._write_postgis
    monkeypatch.setattr(copying, "_write_postgis", broken)
    with pytest.raises(RuntimeError, match="simulated"):
        workflows.copy_store(gpkg_mini_store, pg_database)
    with pytest.raises(NotAStoreError, match="holds no hydroatlas store"):
        open_store(pg_database)
    monkeypatch.undo()
    workflows.copy_store(gpkg_mini_store, pg_database)  # the database takes a copy afterwards
    assert _dump(pg_database) == _dump(gpkg_mini_store)


# -- statistics in SQL ----------------------------------------------------------------------------------------------
def _assert_rows_close(got, want, rel=1e-12):
    assert len(got) == len(want)
    for g, w in zip(got, want):
        assert g.keys() == w.keys()
        for key in w:
            a, b = g[key], w[key]
            if isinstance(b, float) and not (isinstance(a, float) and math.isnan(a) and math.isnan(b)):
                assert a == pytest.approx(b, rel=rel), (w.get("unit"), key)
            elif isinstance(b, list) and b and isinstance(b[0], float):
                assert a == pytest.approx(b, rel=rel), (w.get("unit"), key)
            else:
                assert a == b, (w.get("unit"), key)


@pytest.fixture(scope="module")
def truth_on_both(truth_store, pg_server, tmp_path_factory):
    """The truth district in a GeoPackage and (copied) in PostGIS, with one well retired; made once."""
    gpkg = copy_file(truth_store, tmp_path_factory.mktemp("truth_both") / "truth.gpkg")
    with open_store(gpkg) as s:
        workflows.retire_records(s, "wells", [s.read("wells")["well_id"].iloc[3]], reason="test")
    url = pg_server.new_database()
    workflows.copy_store(gpkg, url)
    yield gpkg, url
    pg_server.drop_database(url)


@pytest.mark.parametrize("per", ["test", "zone", "well"])
@pytest.mark.parametrize("policy", ["default", "include_poor", "exclude_wells", "exclude_straddles"])
def test_unit_statistics_in_sql_equal_the_pandas_path(truth_on_both, per, policy):
    """Unit statistics aggregated in PostgreSQL (only one row per unit reaches the client) equal the pandas path
    over the GeoPackage (itself checked against published values in tests/test_stats.py) to 1e-12, with the same
    counts, the same tests left out and the same n_left_out; the store-aggregated path over the GeoPackage
    (pandas) equals it too."""
    from hydroatlas.study import Study
    from hydroatlas.workflows.store_jobs import unit_stats_in_store, unit_stats_selected

    gpkg, url = truth_on_both
    with open_store(gpkg) as g:
        wells = list(g.read("wells")["well_id"])
    kw = {}
    if policy == "include_poor":
        kw["policy"] = SelectionPolicy(include_poor=True)
    elif policy == "exclude_wells":
        kw["policy"] = SelectionPolicy(exclude_wells=(wells[0], wells[5]))
    elif policy == "exclude_straddles":
        kw["exclude_straddles"] = True
    with open_store(gpkg) as g, open_store(url) as p:
        assert p.sql_aggregates and not g.sql_aggregates
        want, want_sel = unit_stats_selected(g, per=per, k_unit="ft/d", **kw)
        got, got_sel = unit_stats_selected(p, per=per, k_unit="ft/d", **kw)
        study = Study(g, kw.get("policy"))
        rows, left = unit_stats_in_store(study, per=per, k_unit="ft/d",
                                         exclude_straddles=kw.get("exclude_straddles", False))
    assert any(r["n_tests"] for r in want)
    _assert_rows_close(got, want)
    assert got_sel == want_sel
    _assert_rows_close(rows, [{k: v for k, v in r.items() if k != "n_left_out"} for r in want])
    assert left == want_sel["left_out"]


def test_unit_statistics_recomputed_from_the_values(pg_mini):
    """Reference: Python's statistics module over the log10 K (m/s) of the unit's tests (good and fair; the one
    poor test of MINI is left out by the default policy)."""
    from hydroatlas.study import Study

    with open_store(pg_mini) as s:
        rows = {r["unit"]: r for r in workflows.unit_stats(s, k_unit="m/s")}
        k = s.read("ktests").merge(Study(s).assignment[["well_id", "zone_id", "unit"]], on=["well_id", "zone_id"])
    top = k[(k["unit"] == "TOP") & (k["quality"] != "poor")]
    lg = [math.log10(v) for v in top["k_ms"]]
    assert rows["TOP"]["n_tests"] == len(lg) >= 3
    assert rows["TOP"]["log10k_mean"] == pytest.approx(statistics.fmean(lg), rel=1e-12)
    assert rows["TOP"]["log10k_var"] == pytest.approx(statistics.variance(lg), rel=1e-12)
    assert rows["TOP"]["k_median"] == pytest.approx(statistics.median(top["k_ms"]), rel=1e-12)
    # the poor test of W2/S2 is left out; the zone straddles TOP and MID and goes to MID (the larger overlap)
    assert (rows["TOP"]["n_left_out"], rows["MID"]["n_left_out"]) == (0, 1)


# -- the command line on a URL ----------------------------------------------------------------------------------------
def test_every_store_command_takes_the_url(pg_server, tmp_path, runner, mini_files):
    """init/import/stats/check/retire/history/restore/upgrade/products on a URL; the password of the URL is
    never shown (messages, JSON, sidecars and the product registry show ***)."""
    url = pg_server.new_database().replace("postgres@", "postgres:s3cret@")  # trust auth ignores it
    try:
        res = cli(runner, "init", url, "--crs", CRS, "--format", "json")
        assert res.exit_code == 0 and json.loads(res.stdout)["store"] == url.replace("s3cret", "***")
        fill_mini(url, mini_files, runner)
        outputs = [res.output]
        for args in (("stats", url, "--format", "json"), ("check", url, "--json"),
                     ("retire", url, "ktests", "W1/P1/slug@2024-05-02", "--reason", "drift"),
                     ("history", url, "ktests", "W1/P1/slug@2024-05-02", "--format", "json"),
                     ("restore", url, "ktests", "W1/P1/slug@2024-05-02"), ("upgrade", url),
                     ("verticals", url, "--format", "json"), ("products", url)):
            res = cli(runner, *args)
            assert res.exit_code == 0, (args, res.output)
            outputs.append(res.output)
        assert [v["replaced_by"] for v in json.loads(outputs[4])] == ["retire", None]
        assert "is current" in outputs[6]
        assert not any("s3cret" in o for o in outputs)
        bad = cli(runner, "stats", url.rsplit("/", 1)[0] + "/no_such_db")
        assert bad.exit_code == 2 and "cannot connect" in bad.output and "s3cret" not in bad.output
        assert bad.output.count("\n") == 1
        empty = pg_server.new_database()
        res = cli(runner, "stats", empty)
        assert res.exit_code == 2 and "holds no hydroatlas store" in res.output and "hydroatlas init" in res.output
    finally:
        pg_server.drop_database(url)


def test_open_errors():
    with pytest.raises(StoreError, match="cannot connect"):
        open_store("postgresql+psycopg://nobody@127.0.0.1:1/db")


def test_snapshot_sees_every_change(pg_mini, tmp_path, runner):
    """The snapshot the refusal tests compare covers geometry, values and settings (so an unchanged snapshot
    means an unchanged store)."""
    with open_store(pg_mini) as s:
        first = s.snapshot()
    moved = write_csv(tmp_path / "w.csv", [["well_id", "x", "y", "ground_elev"], ["W4", 611000.5, 4101000, 302]])
    assert "1 updated" in cli(runner, "import", pg_mini, "wells", moved).output
    with open_store(pg_mini) as s:
        second = s.snapshot()
    assert second["wells"] != first["wells"] and len(second["record_history"]) == 1
    assert np.isclose(json.loads(second["record_history"][0][5])["x"], 611000.0)


def test_rows_keep_the_order_of_the_file(pg_mini):
    """fid follows the file's rows, as in a GeoPackage (Store.read gives rows in import order)."""
    with open_store(pg_mini) as s:
        for table in ("wells", "zones", "ktests", "heads"):
            rows = s.read(table, ["source_row"])["source_row"].tolist()
            assert rows == list(range(1, len(rows) + 1)), table


def test_a_missing_server_is_named(monkeypatch):
    """Where the PostgreSQL binaries are missing, the reason the PostGIS tests skip (or fail under
    HYDROATLAS_REQUIRE_ALL=1, conftest.py: pg_server) names what to install."""
    import pg_server as pgs

    monkeypatch.setattr(pgs, "find_bindir", lambda: None)
    reason = pgs.missing_reason()
    assert "PostgreSQL server binaries not found" in reason and "apt-get install postgresql" in reason
