"""The store stays a GeoPackage that a desktop GIS and GDAL can index, edit and validate.

Sources: OGC GeoPackage 1.4 (OGC 12-128r19) clause 2.1.3 (GeoPackageBinary, requirement 149 on
empty geometries), Annex F.3 "RTree Spatial Indexes" (virtual table, the 1.4 trigger set, the
ST_* functions and their abstract tests); GDAL's GeoPackage driver (through pyogrio) as the
reference GIS; GDAL's validator ``validate_gpkg.py`` (gdal-utils, MIT licence) as the reference
checker.
"""

from __future__ import annotations

import json
import math
import sqlite3
import struct

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import shapely
from pyproj import Transformer

from hydroatlas import open_store
from hydroatlas.errors import ParameterError
from hydroatlas.store import gpkg_sql
from hydroatlas.store.geopackage import decode_geometries, encode_geometries

from conftest import CRS, MINI, cli, require_all, write_csv

FEATURE_TABLES = ("wells", "springs", "areas")
TRIGGERS_1_4 = {"insert", "update2", "update4", "update5", "update6", "update7", "delete"}

SPRINGS = [["spring_id", "x", "y", "elev", "name", "unit"],
           ["SP1", 610500, 4100500, 295, "Upper", "TOP"],
           ["SP2", 611500, 4101500, 298, "", ""]]


def _areas_geojson(path, rings_utm, ids=("R1",)):
    """A GeoJSON (WGS 84, as RFC 7946 asks) of polygons given in store coordinates."""
    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    feats = []
    for area_id, ring in zip(ids, rings_utm):
        coords = [list(tr.transform(x, y)) for x, y in ring]
        feats.append({"type": "Feature", "properties": {"area_id": area_id, "kind": "recharge"},
                      "geometry": {"type": "Polygon", "coordinates": [coords]}})
    path.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    return path


def _box(x0, y0, x1, y1):
    return [(x0, y0), (x1, y0), (x1, y1), (x0, y1), (x0, y0)]


@pytest.fixture
def gis_store(mini_store, runner, tmp_path):
    """The mini store with springs and one recharge area as well, so every feature table has rows."""
    assert cli(runner, "import", mini_store, "springs", write_csv(tmp_path / "springs.csv", SPRINGS)).exit_code == 0
    areas = _areas_geojson(tmp_path / "areas.geojson", [_box(610200, 4100200, 610800, 4100800)])
    res = cli(runner, "import", mini_store, "areas", areas)
    assert res.exit_code == 0, res.output
    return mini_store


# -- the SQL functions -------------------------------------------------------------

def _blob(geom, *, srs_id=32616, big_endian=False, envelope=True):
    """A GeoPackageBinary written independently of the store's encoder (clause 2.1.3.1.1)."""
    order = ">" if big_endian else "<"
    wkb = shapely.to_wkb(geom, byte_order=0 if big_endian else 1, output_dimension=2)
    flags = 0 if big_endian else 1
    if geom.is_empty:
        flags |= 0b1_0000
        env = b""
    elif envelope:
        flags |= 1 << 1
        minx, miny, maxx, maxy = geom.bounds
        env = struct.pack(order + "4d", minx, maxx, miny, maxy)
    else:
        env = b""
    return b"GP\x00" + bytes([flags]) + struct.pack(order + "i", srs_id) + env + wkb


GEOMS = [
    shapely.Point(610000.5, 4100000.25),
    shapely.box(-3.5, 2.0, 7.25, 9.0),
    shapely.MultiPolygon([shapely.box(0, 0, 1, 1), shapely.box(5, -2, 6, 3)]),
    shapely.LineString([(1, 1), (4, -6), (2, 8)]),
]


@pytest.mark.parametrize("big_endian", [False, True])
@pytest.mark.parametrize("envelope", [True, False])
@pytest.mark.parametrize("geom", GEOMS, ids=lambda g: g.geom_type)
def test_st_functions_match_geometry_bounds(geom, envelope, big_endian):
    """Annex F.3 abstract test /reg_ext/features/spatial_indexes/implementation/sql_functions:
    ST_MinX/MaxX/MinY/MaxY give the envelope, ST_IsEmpty 0, in both byte orders, with and without
    a header envelope."""
    con = sqlite3.connect(":memory:")
    gpkg_sql.register_functions(con)
    blob = _blob(geom, big_endian=big_endian, envelope=envelope)
    row = con.execute("SELECT ST_MinX(?1), ST_MaxX(?1), ST_MinY(?1), ST_MaxY(?1), ST_IsEmpty(?1), "
                      "ST_SRID(?1), ST_GeometryType(?1)", (blob,)).fetchone()
    minx, miny, maxx, maxy = geom.bounds
    assert row == (minx, maxx, miny, maxy, 0, 32616, geom.geom_type.upper())


@pytest.mark.parametrize("geom", [shapely.Point(), shapely.from_wkt("MULTIPOLYGON EMPTY"),
                                  shapely.from_wkt("LINESTRING EMPTY")], ids=lambda g: g.geom_type)
def test_st_functions_on_empty_and_null(geom):
    """Annex F.3 table of SQL functions: ST_IsEmpty is 1 for an empty geometry and NULL for NULL;
    an empty geometry has no envelope (NULL bounds), so the R-tree triggers skip it."""
    con = sqlite3.connect(":memory:")
    gpkg_sql.register_functions(con)
    for blob in (_blob(geom), encode_geometries([geom], 32616)[0]):
        assert con.execute("SELECT ST_IsEmpty(?1), ST_MinX(?1), ST_MaxY(?1)", (blob,)).fetchone() == (1, None, None)
    assert con.execute("SELECT ST_IsEmpty(NULL), ST_MinX(NULL), ST_SRID(NULL), ST_GeometryType(NULL)").fetchone() \
        == (None, None, None, None)
    # a point written as NaN coordinates without the empty flag (clause 2.1.3.1.1 note) is empty too
    nan_point = b"GP\x00\x01" + struct.pack("<i", 0) + shapely.to_wkb(shapely.Point(), byte_order=1)
    assert con.execute("SELECT ST_IsEmpty(?)", (nan_point,)).fetchone() == (1,)
    # not a GeoPackage geometry: NULL, not an exception that would abort the caller's statement
    assert con.execute("SELECT ST_IsEmpty(x'00'), ST_MinX(x'474c0001')").fetchone() == (None, None)


def test_gpkg_is_assignable():
    """OGC 12-128r19 clause 2.1.6 / Annex E geometry type hierarchy, as used by the geometry-type triggers."""
    con = sqlite3.connect(":memory:")
    gpkg_sql.register_functions(con)
    yes = [("GEOMETRY", "MULTIPOLYGON"), ("MULTISURFACE", "MULTIPOLYGON"), ("GEOMETRYCOLLECTION", "MULTIPOINT"),
           ("CURVEPOLYGON", "POLYGON"), ("SURFACE", "POLYGON"), ("CURVE", "LINESTRING"), ("POINT", "POINT")]
    no = [("POLYGON", "MULTIPOLYGON"), ("MULTIPOINT", "POINT"), ("POINT", "GEOMETRY"), ("LINESTRING", "CURVE")]
    for expected, actual in yes:
        assert con.execute("SELECT GPKG_IsAssignable(?, ?)", (expected, actual)).fetchone() == (1,), (expected, actual)
    for expected, actual in no:
        assert con.execute("SELECT GPKG_IsAssignable(?, ?)", (expected, actual)).fetchone() == (0,), (expected, actual)


def test_functions_are_registered_deterministic(empty_store):
    """SQLite (https://sqlite.org/deterministic.html) lets only deterministic functions into indexes and
    CHECKs; a GIS may index on ST_MinX. Our connection accepts it; that needs SQLITE_DETERMINISTIC."""
    with open_store(empty_store) as s:
        s._conn.execute("CREATE TEMP TABLE t (g BLOB)")
        s._conn.execute("CREATE INDEX temp.t_minx ON t (ST_MinX(g))")


# -- empty geometries ------------------------------------------------------------------

def test_empty_geometry_encoding():
    """Clause 2.1.3.1.1: empty flag is bit 4 of the flags byte; requirement 149: an empty geometry
    has no envelope (code 0) or a NaN one; an empty point is NaN coordinates, little endian
    0x000000000000f87f."""
    blobs = encode_geometries([shapely.Point(), shapely.from_wkt("MULTIPOLYGON EMPTY"), shapely.Point(1, 2)], 4326)
    for blob in blobs[:2]:
        assert blob[3] & 0b1_0000 and (blob[3] >> 1) & 0b111 == 0
    assert not blobs[2][3] & 0b1_0000
    assert blobs[0][8 + 5:] == bytes.fromhex("000000000000f87f") * 2
    back = decode_geometries(blobs + [None])
    assert back[0].is_empty and back[0].geom_type == "Point"
    assert back[1].is_empty and back[1].geom_type == "MultiPolygon"
    assert back[2].equals(shapely.Point(1, 2)) and back[3] is None


def test_empty_geometry_in_store_is_read_by_gdal(mini_store):
    """An empty well geometry (a GIS that cleared it) stays out of the R-tree and GDAL reads it as empty."""
    with open_store(mini_store) as s:
        blob = encode_geometries([shapely.Point()], s.srs_id)[0]
        with s.transaction():
            s._conn.execute("UPDATE wells SET geom = ? WHERE well_id = 'W2'", (blob,))
        ids = {r[0] for r in s._conn.execute("SELECT id FROM rtree_wells_geom")}
        fid = s._conn.execute("SELECT fid FROM wells WHERE well_id = 'W2'").fetchone()[0]
        assert fid not in ids and len(ids) == 3  # trigger update2 removed it
        geoms = s.read_geometries("wells").set_index("well_id").geometry
        assert geoms["W2"].is_empty
    wells = pyogrio.read_dataframe(mini_store, layer="wells").set_index("well_id")
    assert wells.geometry["W2"] is None or wells.geometry["W2"].is_empty
    assert wells.geometry["W1"].equals(shapely.Point(610000, 4100000))


# -- the spatial index made at init -----------------------------------------------------

def test_init_creates_annex_f3_spatial_index(empty_store):
    """Annex F.3: virtual table created with the exact statement of the spec, the seven 1.4 triggers
    (update1/update3 of 1.3 replaced by update5/6/7), and a gpkg_extensions row with scope write-only;
    gpkg_extensions has the columns of the spec's table definition (clause 2.3.2.1.1)."""
    con = sqlite3.connect(empty_store)
    ext_cols = [(r[1], r[2], r[3]) for r in con.execute("PRAGMA table_info(gpkg_extensions)")]
    assert ext_cols == [("table_name", "TEXT", 0), ("column_name", "TEXT", 0), ("extension_name", "TEXT", 1),
                        ("definition", "TEXT", 1), ("scope", "TEXT", 1)]
    for t in FEATURE_TABLES:
        sql = con.execute("SELECT sql FROM sqlite_master WHERE name = ?", (f"rtree_{t}_geom",)).fetchone()[0]
        assert sql == f"CREATE VIRTUAL TABLE rtree_{t}_geom USING rtree(id, minx, maxx, miny, maxy)"
        names = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'trigger' AND tbl_name = ? "
                                           "AND name LIKE ?", (t, f"rtree_{t}_geom_%"))}
        assert names == {f"rtree_{t}_geom_{s}" for s in TRIGGERS_1_4}
        assert con.execute("SELECT scope FROM gpkg_extensions WHERE table_name = ? AND column_name = 'geom' AND "
                           "extension_name = 'gpkg_rtree_index'", (t,)).fetchall() == [("write-only",)]
    assert con.execute("PRAGMA journal_mode").fetchone() == ("wal",)
    con.close()


def test_rtree_follows_imports_and_gdal_uses_it(gis_store):
    """The R-tree holds each feature's envelope (float32, rounded outwards, per the SQLite R*Tree module);
    GDAL sees the index (fast spatial filter) and a bbox query through it finds the right wells."""
    con = sqlite3.connect(gis_store)
    rows = dict((r[0], r[1:]) for r in con.execute("SELECT id, minx, maxx, miny, maxy FROM rtree_wells_geom"))
    for fid, x, y in con.execute("SELECT fid, x, y FROM wells"):
        minx, maxx, miny, maxy = rows[fid]
        assert minx <= x <= maxx and miny <= y <= maxy and maxx - minx < 0.1
    assert con.execute("SELECT count(*) FROM rtree_areas_geom").fetchone() == (1,)
    assert con.execute("SELECT count(*) FROM rtree_springs_geom").fetchone() == (2,)
    con.close()
    assert pyogrio.read_info(gis_store, layer="wells")["capabilities"]["fast_spatial_filter"]
    found = pyogrio.read_dataframe(gis_store, layer="wells", bbox=(611900, 4099900, 612100, 4100100))
    assert list(found["well_id"]) == ["W2"]


# -- a GIS adds its own spatial index, then hydroatlas imports again ------------------------

def _gdal_trigger_sql(path) -> list[str]:
    """The CREATE statements of the spatial index that GDAL's GeoPackage driver writes for a new layer.

    GDAL writes them when it creates a layer; pyogrio has no update-mode SQL to run
    CreateSpatialIndex() on an existing one, so a scratch layer is written and its
    statements are read back as GDAL wrote them, with the layer name to be replaced.
    """
    gdf = gpd.GeoDataFrame({"note": ["scratch"]}, geometry=[shapely.Point(610100, 4100100)], crs=CRS)
    pyogrio.write_dataframe(gdf, path, layer="gis_scratch", driver="GPKG", append=True)
    con = sqlite3.connect(path)
    stmts = [r[0] for r in con.execute(
        "SELECT sql FROM sqlite_master WHERE (type = 'trigger' AND name LIKE 'rtree_gis_scratch_geom_%') "
        "OR name = 'rtree_gis_scratch_geom' ORDER BY type = 'trigger', name")]
    con.close()
    assert any("ST_IsEmpty" in s for s in stmts) and len(stmts) == 8  # GDAL >= 3.6 writes the 1.4 set
    return stmts


def _replace_index_with_gdals(path, table, gdal_stmts):
    """Drop the store's R-tree of ``table`` and build GDAL's, filled as GDAL fills it."""
    con = sqlite3.connect(path)
    for (name,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'trigger' AND name LIKE ?",
                               (f"rtree_{table}_geom_%",)).fetchall():
        con.execute(f'DROP TRIGGER "{name}"')
    con.execute(f'DROP TABLE "rtree_{table}_geom"')
    for stmt in gdal_stmts:
        con.execute(stmt.replace("gis_scratch", table))
    fids, blobs = zip(*con.execute(f'SELECT fid, geom FROM "{table}"').fetchall()) or ((), ())
    bounds = shapely.bounds(decode_geometries(list(blobs)))
    con.executemany(f'INSERT INTO "rtree_{table}_geom" VALUES (?, ?, ?, ?, ?)',
                    [(f, b[0], b[2], b[1], b[3]) for f, b in zip(fids, bounds)])
    con.commit()
    sql = con.execute("SELECT sql FROM sqlite_master WHERE name = ?", (f"rtree_{table}_geom_insert",)).fetchone()[0]
    con.close()
    return sql


def test_imports_after_gdal_spatial_index(gis_store, runner, tmp_path):
    """Issue 9 item 7: after GDAL's GeoPackage driver indexes the feature tables, imports of wells,
    springs and areas still work (they failed with 'no such function: ST_IsEmpty'), and GDAL's
    triggers keep its index right."""
    gdal_stmts = _gdal_trigger_sql(gis_store)
    for table in FEATURE_TABLES:
        sql = _replace_index_with_gdals(gis_store, table, gdal_stmts)
        assert f'"{table}"' in sql  # GDAL quotes identifiers: the trigger is GDAL's, not ours
    # without the functions (plain sqlite3) GDAL's triggers refuse every new feature: the original bug
    con = sqlite3.connect(gis_store)
    with pytest.raises(sqlite3.OperationalError, match="no such function: ST_IsEmpty"):
        con.execute("INSERT INTO wells (geom, well_id, x, y, ground_elev, source_file, source_row) "
                    "VALUES (x'47500001e6100000', 'X', 0, 0, 0, 'f', 1)")
    con.close()

    wells = [list(r) for r in MINI["wells.csv"]]
    wells[2][1] = 612500  # W2 moved east
    wells.append(["W5", 613000, 4103000, 320, 80, "monitoring", "New"])
    springs = SPRINGS + [["SP3", 612800, 4102800, 300, "", ""]]
    areas = _areas_geojson(tmp_path / "areas2.geojson", [_box(610200, 4100200, 610800, 4100800),
                                                         _box(612000, 4102000, 612400, 4102400)], ids=("R1", "R2"))
    for kind, path in (("wells", write_csv(tmp_path / "wells2.csv", wells)),
                       ("springs", write_csv(tmp_path / "springs2.csv", springs)), ("areas", areas)):
        res = cli(runner, "import", gis_store, kind, path)
        assert res.exit_code == 0, res.output

    def bbox_ids(layer, key, box):
        return sorted(pyogrio.read_dataframe(gis_store, layer=layer, bbox=box)[key])

    assert bbox_ids("wells", "well_id", (612400, 4099900, 612600, 4100100)) == ["W2"]
    assert bbox_ids("wells", "well_id", (611900, 4099900, 612100, 4100100)) == []  # not at the old place
    assert bbox_ids("wells", "well_id", (612900, 4102900, 613100, 4103100)) == ["W5"]
    assert bbox_ids("springs", "spring_id", (612700, 4102700, 612900, 4102900)) == ["SP3"]
    assert bbox_ids("areas", "area_id", (612100, 4102100, 612200, 4102200)) == ["R2"]
    # GDAL's own layer in the store is untouched and readable
    assert list(pyogrio.read_dataframe(gis_store, layer="gis_scratch")["note"]) == ["scratch"]


# -- GDAL's validator ---------------------------------------------------------------------

def _validation_errors(path) -> list:
    """Errors of GDAL's validate_gpkg.py (gdal-utils, installed with --no-deps), all checks, no abort."""
    try:
        from osgeo_utils.samples import validate_gpkg
    except ImportError:
        if require_all():
            pytest.fail("GDAL's validate_gpkg.py is missing: pip install --no-deps gdal-utils")
        pytest.skip("gdal-utils (GDAL's validate_gpkg.py) is not installed")
    checker = validate_gpkg.GPKGChecker(str(path), abort_at_first_error=False, extra_checks=True,
                                        warning_msg=False)
    checker.check()
    return checker.errors


def test_store_passes_gdal_validator(gis_store):
    """GDAL validate_gpkg.py: the store, with features in all three layers and an R-tree on each, is valid."""
    assert _validation_errors(gis_store) == []


def test_validator_catches_a_broken_index(gis_store):
    """The check above can fail: GDAL validate_gpkg.py (requirement 75 of Annex F.3) reports a missing
    1.4 trigger and an R-tree that gpkg_extensions does not declare."""
    con = sqlite3.connect(gis_store)
    con.execute("DROP TRIGGER rtree_wells_geom_update6")
    con.execute("DELETE FROM gpkg_extensions WHERE table_name = 'springs'")
    con.commit()
    con.close()
    messages = " | ".join(str(m) for _, m in _validation_errors(gis_store))
    assert "rtree_wells_geom_update6 trigger missing" in messages
    assert "springs has a RTree, but not declared" in messages


def test_layers_output_passes_gdal_validator(gis_store, runner, tmp_path):
    """GDAL validate_gpkg.py: the layers.gpkg written by 'hydroatlas layers' is valid."""
    out = tmp_path / "out"
    res = cli(runner, "layers", gis_store, "--out", out)
    assert res.exit_code == 0, res.output
    assert (out / "layers.gpkg").is_file()
    assert _validation_errors(out / "layers.gpkg") == []


# -- geometry against x / y ----------------------------------------------------------------

def test_geometry_mismatches(gis_store):
    """A GIS moves a well (its geometry) while computations read x / y: the check lists rows whose two
    positions differ by more than 1e-6 of the store's length unit, and empty or missing geometry."""
    with open_store(gis_store) as s:
        assert gpkg_sql.geometry_mismatches(s, "wells").empty
        enc = lambda g: encode_geometries([g], s.srs_id)[0]  # noqa: E731
        with s.transaction():
            upd = "UPDATE wells SET geom = ? WHERE well_id = ?"
            s._conn.execute(upd, (enc(shapely.Point(610000 + 5e-7, 4100000)), "W1"))  # within tolerance
            s._conn.execute(upd, (enc(shapely.Point(612000, 4100000 + 2e-6)), "W2"))  # just beyond
            s._conn.execute(upd, (enc(shapely.Point(610050, 4102010)), "W3"))          # dragged on a map
            s._conn.execute(upd, (enc(shapely.Point()), "W4"))                         # cleared
        found = gpkg_sql.geometry_mismatches(s, "wells")
        assert list(found["well_id"]) == ["W2", "W3", "W4"]
        assert list(found["problem"]) == ["moved", "moved", "empty geometry"]
        w3 = found.set_index("well_id").loc["W3"]
        assert (w3["x"], w3["y"], w3["geom_x"], w3["geom_y"]) == (610000.0, 4102000.0, 610050.0, 4102010.0)
        assert math.isnan(found.set_index("well_id").loc["W4", "geom_x"])
        assert list(gpkg_sql.geometry_mismatches(s._conn, "wells", tolerance=1e-3)["well_id"]) == ["W3", "W4"]
        assert gpkg_sql.geometry_mismatches(s, "springs").empty
        with pytest.raises(ParameterError, match="no point geometry with x and y"):
            gpkg_sql.geometry_mismatches(s, "areas")
        # the R-tree followed the move (trigger update6)
        fid = s._conn.execute("SELECT fid FROM wells WHERE well_id = 'W3'").fetchone()[0]
        minx, maxx = s._conn.execute("SELECT minx, maxx FROM rtree_wells_geom WHERE id = ?", (fid,)).fetchone()
        assert minx <= 610050 <= maxx
    assert np.isfinite(pyogrio.read_info(gis_store, layer="wells")["total_bounds"]).all()
