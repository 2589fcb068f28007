"""Model-grid writers (hydroatlas/export/modelgrid.py, hydroatlas/export/mf6.py) checked by outside tools.

- The CF checker (the ``cfchecks`` command of the cfchecker package; needs the UDUNITS-2 library from Debian)
  reports no errors and no warnings on the NetCDF files of unrotated, rotated and feet grids; the same file with
  its grid mapping broken is reported (so the check can fail).
- GDAL's netCDF driver (through rasterio) and rioxarray read the CRS, the geotransform and the arrays.
- flopy reads the MODFLOW 6 simulation back (``MFSimulation.load``): every array equals ours, the grid's
  origin, rotation and units are ours, flopy's ``check()`` reports no errors (and does report a broken array).
- flopy's own grid geometry (``modelgrid``) and GDAL's geotransform give the same cell corners: two libraries
  that share no code with hydroatlas agree on where a rotated grid lies.

MODFLOW 6 itself is not run (no executable is installed here).

The layers are small invented arrays built in the tests (:func:`make_layers`), not a check value.
"""

from __future__ import annotations

import importlib.util
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pyproj import CRS

from conftest import require_all
from hydroatlas.errors import ParameterError
from hydroatlas.export.mf6 import pumping_now, write_mf6
from hydroatlas.export.modelgrid import write_model_grid
from hydroatlas.layering import ModelLayers

UTM = "EPSG:32616"
FT_CRS = "EPSG:2246"  # a projected CRS in US survey feet
X0, Y0, CELL = 610000.0, 4100000.0, 250.0
CAUTION = "screening-level estimates"


def _need(module: str, why: str):
    """Skip when ``module`` is missing, or fail when HYDROATLAS_REQUIRE_ALL=1 (CI)."""
    if importlib.util.find_spec(module) is None:
        message = f"{module} is not installed ({why}); pip install -e '.[test]'"
        if require_all():
            pytest.fail(message)
        pytest.skip(message)


def _need_udunits():
    """The CF checker loads the UDUNITS-2 C library (Debian: libudunits2-0, installed by .ci/run)."""
    import ctypes.util

    if ctypes.util.find_library("udunits2") is None:
        message = "the UDUNITS-2 library is missing (apt-get install libudunits2-0); the CF checker needs it"
        if require_all():
            pytest.fail(message)
        pytest.skip(message)
    _need("cfchecker", "the CF checker")
    _need("compliance_checker", "it ships the CF standard-name table used offline")


def make_layers(*, rotation=0.0, length_unit="m", crs=UTM, nrow=5, ncol=7, x0=X0, y0=Y0, cell=CELL,
                strt_source=False) -> ModelLayers:
    """Three layers (aquifer, aquitard, aquifer) with a pass-through strip and one inactive column.

    The top carries a small random roughness (< 0.01) so that numbers do not print short: a writer that rounds
    fails the equality checks."""
    rough = np.random.default_rng(11).uniform(0.0, 0.01, (nrow, ncol))
    top = 300.0 + np.linspace(0.0, 12.0, ncol)[None, :] + np.linspace(0.0, 4.0, nrow)[:, None] + rough
    b1 = top - 40.0
    b2 = b1 - 10.0 - np.arange(ncol)[None, :] * 0.5
    b3 = b2 - 60.0
    botm = np.array([b1, b2, b3])
    idomain = np.ones((3, nrow, ncol), "int32")
    idomain[1, 0, :2] = -1  # the aquitard is thinner than a minimum there (0.5): pass-through
    botm[1, 0, :2] = b1[0, :2] - 0.5
    idomain[:, -1, -1] = 0  # outside the domain
    k = np.array([np.full((nrow, ncol), 5.0) + np.arange(ncol) * 0.25, np.full((nrow, ncol), 1e-4),
                  np.full((nrow, ncol), 20.0)])
    k33 = k / np.array([10.0, 1.0, 10.0])[:, None, None]
    strt = np.array([np.full((nrow, ncol), 290.0), np.full((nrow, ncol), 280.0), np.full((nrow, ncol), 270.0)])
    strt[0] -= np.arange(ncol) * 0.3 + rough
    k[0] *= 1.0 + rough
    for a in (botm, k, k33, strt):
        a[:, -1, -1] = np.nan  # nothing is known outside the domain
    extra = {}
    if strt_source:
        src = np.zeros((3, nrow, ncol), "int8")
        src[1] = 1
        extra["strt_source"] = src
    return ModelLayers(units=["UPA", "TGT", "LWA"], roles=["aquifer", "aquitard", "aquifer"], top=top, botm=botm,
                       idomain=idomain, k=k, k33=k33, strt=strt, icelltype=np.array([1, 0, 0]),
                       length_unit=length_unit, k_unit=f"{length_unit}/d", time_unit="days",
                       merged={"TGT": ["THN"]}, notes=["invented test layers"], x0=x0, y0=y0, cell=cell,
                       nrow=nrow, ncol=ncol, rotation=rotation, crs=CRS(crs), **extra)


def write(tmp_path, layers, name="model.nc") -> dict:
    return write_model_grid(tmp_path / name, layers, history="test history", source="test source", caution=CAUTION)


def corners_by_hand(layers) -> np.ndarray:
    """Outer corner of row 1, column 1 and the corners one column and one row on, from the grid's definition:
    the lower-left corner (x0, y0), rows counted from the far side, rotation counter-clockwise about (x0, y0)."""
    t = math.radians(layers.rotation)
    ex, ey = np.array([math.cos(t), math.sin(t)]), np.array([-math.sin(t), math.cos(t)])  # grid x, y axes
    far = np.array([layers.x0, layers.y0]) + layers.nrow * layers.cell * ey
    return np.array([far, far + layers.cell * ex, far - layers.cell * ey])


# -- the CF checker ---------------------------------------------------------------------------------------------
def _cf_tables(tmp_path) -> list[str]:
    """Offline tables for cfchecks: the CF standard-name table that compliance-checker ships, and empty area-type
    and region tables (the files have no area_type or region variables, so no entry of these is consulted; the
    checker only needs a table to read)."""
    from importlib.resources import files

    names = files("compliance_checker") / "data" / "cf-standard-name-table.xml"
    area = tmp_path / "area-type-table.xml"
    area.write_text('<?xml version="1.0"?>\n<area_type_table><version_number>empty</version_number>'
                    '<date>none</date></area_type_table>\n')
    region = tmp_path / "standardized-region-list.xml"
    region.write_text('<?xml version="1.0"?>\n<standardized_region_list><version_number>empty</version_number>'
                      '<date>none</date></standardized_region_list>\n')
    return ["-s", str(names), "-a", str(area), "-r", str(region)]


def cfchecks(tmp_path, nc) -> str:
    exe = Path(sys.executable).with_name("cfchecks")
    res = subprocess.run([str(exe), *_cf_tables(tmp_path), str(nc)], capture_output=True, text=True, timeout=120)
    return res.stdout + res.stderr


@pytest.mark.parametrize("rotation, length_unit, crs", [(0.0, "m", UTM), (30.0, "m", UTM), (-12.5, "ft", FT_CRS)])
def test_cf_checker_finds_no_error_or_warning(tmp_path, rotation, length_unit, crs):
    """The CF checker (cfchecker 4.1, CF-1.8) passes unrotated and rotated grids, metres and feet."""
    _need_udunits()
    layers = make_layers(rotation=rotation, length_unit=length_unit, crs=crs, strt_source=True)
    nc = Path(write(tmp_path, layers)["netcdf"])
    report = cfchecks(tmp_path, nc)
    assert "Checking against CF Version CF-1.8" in report, report
    assert "ERRORS detected: 0" in report and "WARNINGS given: 0" in report, report


def test_cf_checker_reports_a_broken_grid_mapping(tmp_path):
    """The check above can fail: an unknown grid_mapping_name and a units text UDUNITS-2 cannot read are reported.

    (Deleting grid_mapping_name, the old file's flaw, makes cfchecker 4.1 itself stop with a traceback while it
    words its error, so the name is spoiled instead.)"""
    _need_udunits()
    import netCDF4

    nc = Path(write(tmp_path, make_layers())["netcdf"])
    with netCDF4.Dataset(nc, "a") as ds:
        ds["crs"].grid_mapping_name = "no_such_projection"
        ds["k"].units = "m per no_such_unit"
    report = cfchecks(tmp_path, nc)
    assert "ERRORS detected: 2" in report, report
    assert "no_such_projection" in report and "m per no_such_unit" in report, report


def test_units_are_udunits_and_every_numeric_variable_has_them(tmp_path):
    """cfunits (UDUNITS-2) reads every units attribute; K is length per day, elevations the model length unit."""
    _need_udunits()
    import cfunits
    import netCDF4

    for length_unit, crs, xy in (("m", UTM, "m"), ("ft", FT_CRS, "US_survey_foot")):
        nc = Path(write(tmp_path, make_layers(length_unit=length_unit, crs=crs, rotation=10.0),
                        f"g_{length_unit}.nc")["netcdf"])
        with netCDF4.Dataset(nc) as ds:
            for name, var in ds.variables.items():
                if var.dtype.kind in "fi" and name != "crs":
                    assert cfunits.Units(var.units).isvalid, (name, var.units)
            assert ds["k"].units == ds["k33"].units == f"{length_unit} day-1"
            assert ds["botm"].units == ds["strt"].units == ds["top"].units == length_unit
            assert ds["x"].units == xy and ds.model_length_unit == length_unit
            # a K of 1 unit/day in m/s, by UDUNITS-2: 1 ft = 0.3048 m exactly, 1 d = 86400 s (VERIFY.md)
            per_s = cfunits.Units.conform(1.0, cfunits.Units(ds["k"].units), cfunits.Units("m s-1"))
            assert per_s == pytest.approx({"m": 1.0, "ft": 0.3048}[length_unit] / 86400.0, rel=1e-12)


# -- GDAL and rioxarray ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("rotation", [0.0, 30.0, 90.0, -45.0])
def test_gdal_reads_crs_geotransform_and_arrays(tmp_path, rotation):
    """GDAL's netCDF driver (rasterio) reports the CRS, the (rotated) geotransform and our arrays, row 1 first."""
    import rasterio

    layers = make_layers(rotation=rotation)
    nc = write(tmp_path, layers)["netcdf"]
    with rasterio.open(f'NETCDF:"{nc}":botm') as r:
        assert CRS(r.crs.to_wkt()).equals(CRS(UTM))
        assert r.count == 3 and (r.height, r.width) == (layers.nrow, layers.ncol)
        gt = r.transform
        got = np.array([gt * (0, 0), gt * (1, 0), gt * (0, 1)])
        assert got == pytest.approx(corners_by_hand(layers), abs=1e-6)
        for b in range(3):
            band = r.read(b + 1, masked=True)
            live = ~np.isnan(layers.botm[b])
            assert np.array_equal(band.data[live], layers.botm[b][live]) and band.mask[~live].all()
    with rasterio.open(f'NETCDF:"{nc}":top') as r:
        assert r.count == 1 and np.array_equal(r.read(1), layers.top)
        assert r.transform == gt


def test_gdal_geotransform_by_hand_for_a_quarter_turn(tmp_path):
    """Worked by hand: a 2 x 3 grid of 10 m cells at (500000, 4000000) turned 90 degrees counter-clockwise has
    its columns running north and its row 1 on the west side, so GDAL's first corner is (499980, 4000000)."""
    import rasterio

    layers = make_layers(rotation=90.0, nrow=2, ncol=3, x0=500000.0, y0=4000000.0, cell=10.0)
    nc = write(tmp_path, layers)["netcdf"]
    with rasterio.open(f'NETCDF:"{nc}":k') as r:
        assert r.transform.to_gdal() == pytest.approx((499980.0, 0.0, 10.0, 4000000.0, 10.0, 0.0), abs=1e-9)


def test_rioxarray_opens_the_netcdf(tmp_path):
    """rioxarray opens a variable (through GDAL) and the whole file (through xarray) with CRS and transform."""
    _need("rioxarray", "the rioxarray check")
    import rioxarray
    import xarray as xr

    for rotation in (0.0, 30.0):
        layers = make_layers(rotation=rotation)
        nc = write(tmp_path, layers, f"r{int(rotation)}.nc")["netcdf"]
        da = rioxarray.open_rasterio(f'NETCDF:"{nc}":k33', masked=True)
        assert da.rio.crs.to_epsg() == 32616 and da.shape == (3, layers.nrow, layers.ncol)
        assert np.allclose(da.values, layers.k33, equal_nan=True)
        assert da["layer"].values.tolist() == [1, 2, 3]
        with xr.open_dataset(nc, decode_coords="all") as ds:
            assert ds["k"].rio.crs.to_epsg() == 32616
            corner = ds["k"].rio.transform() * (0, 0)
            assert corner == pytest.approx(tuple(corners_by_hand(layers)[0]), abs=1e-6)
            assert [u.decode() for u in ds["unit_code"].values] == ["UPA", "TGT", "LWA"]


def test_xarray_reads_arrays_units_and_flags(tmp_path):
    import xarray as xr

    layers = make_layers(strt_source=True)
    nc = write(tmp_path, layers)["netcdf"]
    with xr.open_dataset(nc) as ds:
        for name in ("botm", "k", "k33", "strt"):
            assert np.array_equal(ds[name].values, getattr(layers, name), equal_nan=True), name
            assert ds[name].dims == ("layer", "y", "x")
        assert np.array_equal(ds["top"].values, layers.top)
        assert np.array_equal(ds["idomain"].values, layers.idomain)
        assert ds["idomain"].attrs["flag_meanings"] == "vertical_pass_through inactive active"
        assert ds["icelltype"].values.tolist() == [1, 0, 0] and ds["icelltype"].dims == ("layer",)
        assert np.array_equal(ds["strt_source"].values, layers.strt_source)
        assert ds["x"].attrs["standard_name"] == "projection_x_coordinate"
        assert ds["x"].values == pytest.approx(X0 + (np.arange(layers.ncol) + 0.5) * CELL)
        assert ds["y"].values == pytest.approx(Y0 + (layers.nrow - np.arange(layers.nrow) - 0.5) * CELL)
        assert ds["crs"].attrs["grid_mapping_name"] == "transverse_mercator"
        assert "time" not in ds.dims and ds.attrs["Conventions"] == "CF-1.8"
        assert ds.attrs["comment"] == CAUTION and json.loads(ds.attrs["hydroatlas_merged"]) == {"TGT": ["THN"]}


def test_rotated_grid_has_2d_coordinates_and_lon_lat(tmp_path):
    """pyproj (reference library) transforms the cell centres to longitude and latitude independently."""
    import xarray as xr
    from pyproj import Transformer

    layers = make_layers(rotation=30.0)
    nc = write(tmp_path, layers)["netcdf"]
    with xr.open_dataset(nc) as ds:
        assert ds["k"].dims == ("layer", "row", "col") and ds["x"].dims == ("row", "col")
        assert set(ds["k"].coords) == {"layer", "lat", "lon", "y", "x"}  # from the variable's coordinates attribute
        lon, lat = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True).transform(ds["x"].values, ds["y"].values)
        assert ds["lon"].values == pytest.approx(lon, abs=1e-9) and ds["lat"].values == pytest.approx(lat, abs=1e-9)
        # the centre of row 1, column 1 is half a cell in from the by-hand corner along both grid axes
        c = corners_by_hand(layers)
        centre = c[0] + 0.5 * (c[1] - c[0]) + 0.5 * (c[2] - c[0])
        assert (float(ds["x"][0, 0]), float(ds["y"][0, 0])) == pytest.approx(tuple(centre), abs=1e-6)


# -- plain arrays and manifest -----------------------------------------------------------------------------------
def test_plain_arrays_and_manifest(tmp_path):
    layers = make_layers(length_unit="ft", crs=FT_CRS, strt_source=True)
    files = write(tmp_path, layers)
    manifest = json.loads(Path(files["manifest"]).read_text())
    assert manifest["length_unit"] == "ft" and manifest["k_unit"] == "ft/d" and manifest["time_unit"] == "days"
    assert (manifest["units"]["k"], manifest["units"]["botm"], manifest["units"]["idomain"]) == ("ft/d", "ft", "1")
    assert manifest["netcdf_units"]["k33"] == "ft day-1"
    assert [r["unit"] for r in manifest["layers"]] == ["UPA", "TGT", "LWA"]
    assert manifest["merged"] == {"TGT": ["THN"]} and manifest["notes"] == ["invented test layers"]
    assert manifest["caution"] == CAUTION and manifest["grid"]["rotation"] == 0.0
    base = Path(files["manifest"]).parent
    for name in ("botm", "idomain", "k", "k33", "strt", "strt_source"):
        for k in range(3):
            entry = manifest["files"][name][k]
            want = np.asarray(getattr(layers, name))[k]
            assert np.array_equal(np.load(base / entry["npy"]), want, equal_nan=True), name
            assert np.allclose(np.loadtxt(base / entry["txt"]), want, rtol=1e-9, equal_nan=True), name
    assert np.array_equal(np.load(base / manifest["files"]["top"][0]["npy"]), layers.top)
    assert np.loadtxt(base / manifest["files"]["icelltype"][0]["txt"]).tolist() == [1, 0, 0]


def test_writer_refuses_bad_layers(tmp_path):
    good = make_layers()
    bad = type("Bad", (), {f: getattr(good, f) for f in ("units", "roles", "top", "idomain", "k", "k33", "strt",
                                                          "icelltype", "length_unit", "k_unit", "time_unit", "merged",
                                                          "notes", "x0", "y0", "cell", "nrow", "ncol", "rotation",
                                                          "crs")})()
    bad.botm = good.botm[:2]
    with pytest.raises(ParameterError, match=r"model array botm has shape \(2, 5, 7\); expected \(3, 5, 7\)"):
        write(tmp_path, bad)
    bad.botm, bad.length_unit = good.botm, "yd"
    with pytest.raises(ParameterError, match="model length unit must be one of m, ft; got 'yd'"):
        write(tmp_path, bad)
    assert not list(tmp_path.iterdir())  # nothing half-written


# -- MODFLOW 6 through flopy ---------------------------------------------------------------------------------------
WELLS = pd.DataFrame([("PW-1", "S1", X0 + 610.0, Y0 + 640.0, 500.0, 250.0, 240.0),   # layer 3
                      ("PW-2", "S1", X0 + 120.0, Y0 + 1130.0, 80.0, 259.9, 259.7),   # layer 2, pass-through there
                      ("FAR", "S1", X0 - 5000.0, Y0, 10.0, 250.0, 240.0)],           # outside the grid
                     columns=["well_id", "zone_id", "x", "y", "rate_m3d", "top_elev", "bottom_elev"])
SPRINGS = pd.DataFrame([("SP 1", X0 + 900.0, Y0 + 700.0, 304.0)], columns=["spring_id", "x", "y", "elev"])


def _load(folder, name="model"):
    import flopy

    sim = flopy.mf6.MFSimulation.load(sim_ws=str(folder), verbosity_level=0)
    return sim, sim.get_model(name)


def _errors(sim) -> list:
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # flopy marks its mf6 checks as due for a rewrite
        results = sim.check(f=None, verbose=False)
    return [row for chk in results for row in chk.summary_array if str(row["type"]).lower().startswith("error")]


@pytest.mark.parametrize("rotation, length_unit, crs", [(0.0, "m", UTM), (30.0, "ft", FT_CRS)])
def test_flopy_reads_back_every_array(tmp_path, rotation, length_unit, crs):
    """flopy.mf6.MFSimulation.load reads the written simulation; every array and grid setting equals ours."""
    _need("flopy", "the MODFLOW 6 writer")
    layers = make_layers(rotation=rotation, length_unit=length_unit, crs=crs)
    summary = write_mf6(tmp_path / "mf6", layers, wells=WELLS, springs=SPRINGS, spring_conductance=150.0)
    sim, gwf = _load(tmp_path / "mf6")
    live = layers.idomain > 0
    dis = gwf.dis
    assert (dis.nlay.get_data(), dis.nrow.get_data(), dis.ncol.get_data()) == (3, layers.nrow, layers.ncol)
    assert np.all(dis.delr.array == CELL) and np.all(dis.delc.array == CELL)
    assert dis.length_units.get_data() == {"m": "meters", "ft": "feet"}[length_unit]
    assert (dis.xorigin.get_data(), dis.yorigin.get_data(), dis.angrot.get_data()) == (X0, Y0, rotation)
    assert np.array_equal(dis.idomain.array, layers.idomain)
    assert np.array_equal(dis.top.array, layers.top)
    assert np.array_equal(dis.botm.array[live], layers.botm[live])
    assert np.array_equal(gwf.npf.k.array[live], layers.k[live])
    assert np.array_equal(gwf.npf.k33.array[live], layers.k33[live])
    assert gwf.npf.icelltype.array.reshape(3, -1)[:, 0].tolist() == [1, 0, 0]
    assert np.array_equal(gwf.ic.strt.array[live], layers.strt[live])
    assert np.isfinite(dis.botm.array).all() and np.isfinite(gwf.npf.k.array).all()  # inactive cells filled
    tdis = sim.tdis
    assert tdis.time_units.get_data() == "days" and tdis.nper.get_data() == 1
    assert "sto" not in [p.package_type for p in gwf.packagelist]  # no storage: steady state
    assert summary["packages"] == ["TDIS", "IMS", "GWF", "DIS", "NPF", "IC", "WEL", "DRN", "OC"]


def test_flopy_check_finds_no_errors_and_finds_a_broken_array(tmp_path):
    _need("flopy", "the MODFLOW 6 writer")
    write_mf6(tmp_path / "mf6", make_layers(rotation=30.0), wells=WELLS, springs=SPRINGS, spring_conductance=150.0)
    sim, gwf = _load(tmp_path / "mf6")
    assert _errors(sim) == []
    k = gwf.npf.k.array.copy()
    k[0, 1, 1] = -1.0
    gwf.npf.k.set_data(k)
    assert _errors(sim), "flopy's check should report a negative K"


def test_flopy_grid_and_gdal_agree_on_a_rotated_grid(tmp_path):
    """flopy's StructuredGrid (from the DIS origin and angrot) and GDAL's geotransform (from the NetCDF) give the
    same cell corners: two independent readings of one rotation convention."""
    _need("flopy", "the MODFLOW 6 writer")
    import rasterio

    layers = make_layers(rotation=30.0)
    nc = write(tmp_path, layers)["netcdf"]
    write_mf6(tmp_path / "mf6", layers)
    _, gwf = _load(tmp_path / "mf6")
    with rasterio.open(f'NETCDF:"{nc}":top') as r:
        gt = r.transform
    mg = gwf.modelgrid
    for i, j in ((0, 0), (2, 5), (layers.nrow - 1, layers.ncol - 1)):
        verts = np.array(mg.get_cell_vertices(i, j))
        gdal = np.array([gt * (j, i), gt * (j + 1, i), gt * (j + 1, i + 1), gt * (j, i + 1)])
        assert sorted(map(tuple, verts.round(6))) == sorted(map(tuple, gdal.round(6)))
    assert (mg.xcellcenters[0, 0], mg.ycellcenters[0, 0]) == pytest.approx(gt * (0.5, 0.5), abs=1e-6)


def test_wells_and_springs_in_their_cells(tmp_path):
    """WEL: layer from the zone's mid elevation, rate negative in model units; DRN at the spring's elevation."""
    _need("flopy", "the MODFLOW 6 writer")
    pint = pytest.importorskip("pint")
    layers = make_layers(length_unit="ft", crs=UTM)  # a feet model on a metre CRS: rates in ft3/d
    summary = write_mf6(tmp_path / "mf6", layers, wells=WELLS, springs=SPRINGS, spring_conductance=150.0)
    _, gwf = _load(tmp_path / "mf6")
    wel = gwf.wel.stress_period_data.get_data(0)
    ft3 = pint.UnitRegistry().Quantity(1.0, "m**3/day").to("ft**3/day").magnitude  # reference library: pint
    # PW-1 at column 3, row 3 (0-based 2, 2 counted from the north edge); mid elevation 245 lies in layer 3
    assert tuple(wel["cellid"][0]) == (2, 2, 2) and wel["q"][0] == pytest.approx(-500.0 * ft3, rel=1e-12)
    # PW-2: mid elevation 259.8 lies in layer 2 (259.5 to 260), a pass-through cell there: layer 1, whose
    # centre (280) is nearer than layer 3's (224.75), takes it
    pw2 = summary["wells"][1]
    assert pw2["well_id"] == "PW-2" and (pw2["row"], pw2["col"]) == (1, 1)
    assert pw2["layer"] == 1 and "pass-through" in pw2["note"]
    assert tuple(wel["cellid"][1]) == (0, 0, 0) and wel["q"][1] == pytest.approx(-80.0 * ft3, rel=1e-12)
    assert summary["wells_left_out"] == [{"well_id": "FAR", "zone_id": "S1", "reason": "outside the grid"}]
    assert summary["rate_unit"] == "ft3/d" and summary["spring_conductance_unit"] == "ft2/d"
    drn = gwf.drn.stress_period_data.get_data(0)
    assert len(drn) == 1 and tuple(drn["cellid"][0]) == (0, 2, 3)  # elevation 304 is within layer 1 there
    assert drn["elev"][0] == 304.0 and drn["cond"][0] == 150.0
    assert drn["boundname"][0].upper() == "SP_1"  # the blank became "_"; MODFLOW names ignore case
    side = json.loads((tmp_path / "mf6" / "hydroatlas_mf6.json").read_text())
    assert side["spring_conductance"] == 150.0 and "MODFLOW 6 uses its own" in side["solver"]


def test_mf6_refusals(tmp_path):
    _need("flopy", "the MODFLOW 6 writer")
    layers = make_layers()
    with pytest.raises(ParameterError, match=r"1 spring\(s\) lie in the grid: give their drain conductance "
                                             r"\(spring_conductance=, m2/d\)") as info:
        write_mf6(tmp_path / "a", layers, springs=SPRINGS)
    assert info.value.param == "spring_conductance"  # the command line spells it --spring-conductance
    bad = make_layers()
    object.__setattr__(bad, "k", np.where(bad.idomain > 0, -bad.k, bad.k))
    with pytest.raises(ParameterError, match="model array k must be > 0 in every active cell"):
        write_mf6(tmp_path / "b", bad)
    assert not (tmp_path / "a").exists() and not (tmp_path / "b").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".part")]


def test_model_name_is_made_valid(tmp_path):
    """MODFLOW 6 names: at most 16 characters without blanks (flopy reads the name back)."""
    _need("flopy", "the MODFLOW 6 writer")
    summary = write_mf6(tmp_path / "mf6", make_layers(), name="a district model, 2024")
    assert summary["name"] == "a_district_model"
    sim, gwf = _load(tmp_path / "mf6", "a_district_model")
    assert gwf.name == "a_district_model"


def test_pumping_now_takes_current_records_and_shares_whole_well_rates():
    """Common practice (no source): a whole-well rate is shared among the zones by open length."""
    wells = pd.DataFrame({"well_id": ["A", "B"], "x": [1.0, 2.0], "y": [1.0, 2.0], "ground_elev": [100.0, 90.0]})
    zones = pd.DataFrame({"well_id": ["A", "A", "B"], "zone_id": ["Z1", "Z2", "Z1"], "top_depth": [10.0, 40.0, 5.0],
                          "bottom_depth": [20.0, 70.0, 15.0]})
    pumping = pd.DataFrame({"well_id": ["A", "A", "B", "B"], "zone_id": ["", "", "Z1", "Z1"],
                            "start": ["2020-01-01", "2023-01-01", "2020-01-01", "2021-01-01"],
                            "end": [None, None, None, "2022-01-01"], "rate_m3d": [100.0, 400.0, 50.0, 70.0]})
    now = pumping_now(pumping, zones, wells)
    assert now[["well_id", "zone_id"]].values.tolist() == [["A", "Z1"], ["A", "Z2"], ["B", "Z1"]]
    assert now["rate_m3d"].tolist() == pytest.approx([100.0, 300.0, 50.0])  # 400 split 10 : 30
    assert now["top_elev"].tolist() == [90.0, 60.0, 85.0] and now["bottom_elev"].tolist() == [80.0, 30.0, 75.0]


# -- through the command line ----------------------------------------------------------------------------------------
@pytest.fixture
def mf6_store(mini_store, tmp_path, runner):
    """The conftest mini district with one pumping record, one ended record and one spring; a LOW head surface."""
    from conftest import cli, write_csv

    rows = {"pumping": [["well_id", "zone_id", "rate", "rate_unit", "start", "end"],
                        ["W1", "P3", 100, "gpm", "2024-01-01", ""],
                        ["W3", "S1", 50, "gpm", "2023-01-01", "2023-06-01"]],  # ended: not pumping now
            "springs": [["spring_id", "x", "y", "elev", "name"], ["SP1", 611100, 4101100, 290, "invented"]]}
    for kind, r in rows.items():
        res = cli(runner, "import", mini_store, kind, write_csv(tmp_path / f"{kind}.csv", r))
        assert res.exit_code == 0, res.output
    out = tmp_path / "out"
    res = cli(runner, "surface", mini_store, "--unit", "LOW", "--quantity", "head", "--method", "idw", "--cell", 200,
              "--out", out)
    assert res.exit_code == 0, res.output
    return mini_store, out


def test_grid_cli_writes_a_simulation_flopy_reads(mf6_store, runner):
    """`grid --mf6 DIR --spring-conductance 10000ft2/d`: flopy reads the simulation; the arrays are the NetCDF's;
    the rate of 100 gpm and the conductance are converted to m3/d and m2/d as pint converts them."""
    _need("flopy", "the MODFLOW 6 writer")
    import pint
    import xarray as xr
    from conftest import cli

    store, out = mf6_store
    res = cli(runner, "grid", store, "--cell", 500, "--surfaces", out, "--mf6", out / "mf6",
              "--spring-conductance", "10000ft2/d", "--out", out / "model.nc")
    assert res.exit_code == 0, res.output
    assert "MODFLOW 6 simulation model: 1 pumped zone(s) in WEL (rates in m3/d), 1 spring(s) in DRN" in res.output
    q = pint.UnitRegistry().Quantity
    manifest = json.loads((out / "manifest.json").read_text())
    cond = q(10000.0, "ft**2/day").to("m**2/day").magnitude  # reference library: pint
    assert manifest["mf6"]["spring_conductance"] == pytest.approx(cond, rel=1e-12)
    assert manifest["mf6"]["spring_conductance_unit"] == "m2/d" and manifest["mf6"]["name"] == "model"
    sim, gwf = _load(out / "mf6")
    assert _errors(sim) == []
    with xr.open_dataset(out / "model.nc") as ds:
        live = ds["idomain"].values > 0
        assert np.array_equal(gwf.dis.idomain.array, ds["idomain"].values)
        for name, arr in (("botm", gwf.dis.botm.array), ("k", gwf.npf.k.array), ("k33", gwf.npf.k33.array),
                          ("strt", gwf.ic.strt.array)):
            assert np.array_equal(arr[live], ds[name].values[live]), name
        assert np.array_equal(gwf.dis.top.array, ds["top"].values)
        units = [u.decode() for u in ds["unit_code"].values]
        # W1 zone P3 lies 70-80 below ground at 300: mid elevation 225, in the LOW layer
        wel = gwf.wel.stress_period_data.get_data(0)
        assert len(wel) == 1 and units[wel["cellid"][0][0]] == "LOW"
        k, i, j = wel["cellid"][0]
        upper = ds["top"].values[i, j] if k == 0 else ds["botm"].values[k - 1, i, j]
        assert ds["botm"].values[k, i, j] < 225.0 <= upper
    gpm = q(100.0, "gallon/minute").to("m**3/day").magnitude
    assert wel["q"][0] == pytest.approx(-gpm, rel=1e-12)
    drn = gwf.drn.stress_period_data.get_data(0)
    assert drn["elev"][0] == 290.0 and drn["cond"][0] == pytest.approx(cond, rel=1e-12)
    # flopy 3.11's check reads cell ids wrongly (int64 ids through an int32 buffer), so look here
    assert gwf.dis.idomain.array[tuple(int(v) for v in drn["cellid"][0])] == 1
    assert gwf.dis.idomain.array[tuple(int(v) for v in wel["cellid"][0])] == 1


def test_grid_cli_needs_a_spring_conductance(mf6_store, runner):
    _need("flopy", "the MODFLOW 6 writer")
    from conftest import cli

    store, out = mf6_store
    res = cli(runner, "grid", store, "--cell", 500, "--surfaces", out, "--mf6", out / "mf6", "--out", out / "m.nc")
    assert res.exit_code == 2
    assert res.output == ("hydroatlas: error: 1 spring(s) lie in the grid: give their drain conductance "
                          "(--spring-conductance, m2/d)\n")
    res = cli(runner, "grid", store, "--cell", 500, "--mf6", out / "mf6", "--spring-conductance", "-5",
              "--out", out / "m.nc")
    assert res.exit_code == 2 and res.output.startswith("hydroatlas: error: --spring-conductance must be > 0")


@pytest.mark.slow
def test_demo_grid_passes_the_cf_checker_and_flopy(tmp_path):
    """The demo region's model grid (the demo's layers and spring conductance): the CF checker finds no error or
    warning, GDAL reads it, flopy reads the simulation back with no errors, every WEL and DRN cell is active."""
    _need_udunits()
    _need("flopy", "the MODFLOW 6 writer")
    import rasterio
    import xarray as xr

    from hydroatlas import demo, workflows

    region = demo.ensure_region_files(tmp_path / "region")
    store = workflows.init_store(tmp_path / "demo.gpkg", crs=(region / "crs.txt").read_text().strip(),
                                 length_unit="m", vertical_datum="demo")
    try:
        for kind in demo.IMPORT_ORDER:
            workflows.import_data(store, kind, region / demo._FILES[kind])
        for code in ("ULS", "LCL"):
            workflows.build_surface(store, code, "head", method="idw", out=tmp_path / "surfaces")
        res = workflows.model_grid(store, cell=250.0, out=tmp_path / "model" / "demo.nc",
                                   layers=["CAP", "ULS", "SHL", "LCL"], surfaces=tmp_path / "surfaces",
                                   mf6=tmp_path / "model" / "mf6", spring_conductance=demo.DEMO_SPRING_CONDUCTANCE)
    finally:
        store.close()
    nc = tmp_path / "model" / "demo.nc"
    report = cfchecks(tmp_path, nc)
    assert "ERRORS detected: 0" in report and "WARNINGS given: 0" in report, report
    with rasterio.open(f'NETCDF:"{nc}":strt') as r, xr.open_dataset(nc) as ds:
        assert r.count == 4 and CRS(r.crs.to_wkt()).equals(CRS((region / "crs.txt").read_text().strip()))
        assert r.transform.to_gdal() == pytest.approx(tuple(json.loads(ds.attrs["hydroatlas_grid"])["geotransform"]))
    m6 = res["mf6"]
    assert m6["wells"] and m6["springs"] and not m6["wells_left_out"] and not m6["springs_left_out"]
    sim, gwf = _load(tmp_path / "model" / "mf6", m6["name"])
    assert _errors(sim) == []
    idomain = gwf.dis.idomain.array
    for spd in (gwf.wel.stress_period_data.get_data(0), gwf.drn.stress_period_data.get_data(0)):
        assert all(idomain[tuple(int(v) for v in c)] == 1 for c in spd["cellid"])
