"""GeoTIFF writer (Cloud Optimized GeoTIFF layout, band descriptions and units), the public ``read_surface``
(xarray), and the grid rule (readable cell sizes, edges on whole multiples of the cell).

The COG layout is checked against GDAL's definition of it, as GDAL's own checker
(``validate_cloud_optimized_geotiff.py`` of the gdal-utils package, source: GDAL documentation, "COG --
Cloud Optimized GeoTIFF generator" and the "COG layout" section of the GTiff driver page) states it. That
script needs GDAL's Python bindings (``osgeo``), which this environment does not have, so its rules are
re-read here from the file's bytes with a small TIFF directory reader (TIFF 6.0 and BigTIFF headers):
the GDAL structural-metadata block right after the header declares ``LAYOUT=IFDS_BEFORE_DATA``; the main
image directory (IFD) follows it at once; every IFD precedes every tile; overview IFDs follow the main one,
each smaller than the last; tile data start with the smallest overview and end with the full resolution;
every image is tiled. A plain GeoTIFF with overviews added afterwards (a layout that is not a COG) must fail
the same reader, so the check is shown able to fail.
"""

from __future__ import annotations

import json
import math
import struct
from decimal import Decimal
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rasterio
from pyproj import CRS as PCRS

from conftest import CRS
from hydroatlas.errors import ParameterError
from hydroatlas.export.rasters import COG_BLOCK, NODATA, read_surface, write_geotiff
from hydroatlas.interp.grid import GridSpec, readable_cell, snapped_extent

# TIFF tags (TIFF 6.0 specification, Adobe 1992)
NEW_SUBFILE_TYPE, IMAGE_WIDTH, IMAGE_LENGTH = 254, 256, 257
STRIP_OFFSETS, TILE_WIDTH, TILE_LENGTH, TILE_OFFSETS = 273, 322, 323, 324
_TYPE_FORMAT = {3: "H", 4: "I", 16: "Q"}  # SHORT, LONG, LONG8 (BigTIFF)
_TYPE_SIZE = {1: 1, 2: 1, 3: 2, 4: 4, 5: 8, 6: 1, 7: 1, 8: 2, 9: 4, 10: 8, 11: 4, 12: 8, 16: 8, 17: 8, 18: 8}


def tiff_directories(path: Path) -> tuple[bytes, list[dict]]:
    """The bytes of a TIFF file and its chain of image directories: offset, tags (numeric arrays only)."""
    data = Path(path).read_bytes()
    order = {b"II": "<", b"MM": ">"}[data[:2]]
    version = struct.unpack(order + "H", data[2:4])[0]
    big = version == 43
    first = struct.unpack(order + ("Q" if big else "I"), data[8:16] if big else data[4:8])[0]
    ifds = []
    offset = first
    while offset:
        count_fmt, entry_size, value_size = ("Q", 20, 8) if big else ("H", 12, 4)
        count = struct.unpack_from(order + count_fmt, data, offset)[0]
        pos = offset + (8 if big else 2)
        tags = {}
        for e in range(count):
            base = pos + e * entry_size
            tag, typ = struct.unpack_from(order + "HH", data, base)
            n = struct.unpack_from(order + ("Q" if big else "I"), data, base + 4)[0]
            if typ not in _TYPE_FORMAT:
                continue
            size = _TYPE_SIZE[typ] * n
            where = base + (12 if big else 8)
            if size > value_size:
                where = struct.unpack_from(order + ("Q" if big else "I"), data, where)[0]
            tags[tag] = list(struct.unpack_from(order + _TYPE_FORMAT[typ] * n, data, where))
        ifds.append({"offset": offset, "tags": tags})
        offset = struct.unpack_from(order + ("Q" if big else "I"), data, pos + count * entry_size)[0]
    return data, ifds


def cog_layout_errors(path: Path) -> list[str]:
    """What keeps ``path`` from the COG layout, by GDAL's rules (see the module docstring); [] when none."""
    data, ifds = tiff_directories(path)
    errors = []
    big = data[2:4] in (b"\x2b\x00", b"\x00\x2b")
    expected = 16 if big else 8
    pattern = b"GDAL_STRUCTURAL_METADATA_SIZE="
    if data[expected:expected + len(pattern)] != pattern:
        errors.append("no GDAL structural metadata right after the header")
    else:
        size = int(data[expected + len(pattern):expected + len(pattern) + 6])
        head_len = len(b"GDAL_STRUCTURAL_METADATA_SIZE=000000 bytes\n")
        block = data[expected + head_len:expected + head_len + size].decode("latin-1")
        if "LAYOUT=IFDS_BEFORE_DATA" not in block:
            errors.append("structural metadata does not declare LAYOUT=IFDS_BEFORE_DATA")
        if "KNOWN_INCOMPATIBLE_EDITION=YES" in block:
            errors.append("KNOWN_INCOMPATIBLE_EDITION=YES is declared")
        expected += head_len + size
        expected += expected % 2
    if ifds[0]["offset"] != expected:
        errors.append(f"main IFD at byte {ifds[0]['offset']}, expected {expected}")
    images = [d for d in ifds if d["tags"].get(NEW_SUBFILE_TYPE, [0])[0] & 4 == 0]  # masks (bit 4) aside
    first_data = []
    for i, d in enumerate(images):
        t = d["tags"]
        if TILE_WIDTH not in t:
            errors.append(f"image {i} is not tiled")
        offsets = [o for o in t.get(TILE_OFFSETS, t.get(STRIP_OFFSETS, [])) if o > 0]
        first_data.append(min(offsets) if offsets else 0)
        if i and (t[IMAGE_WIDTH][0] > images[i - 1]["tags"][IMAGE_WIDTH][0]
                  or t[IMAGE_LENGTH][0] > images[i - 1]["tags"][IMAGE_LENGTH][0]):
            errors.append(f"image {i} is larger than image {i - 1}")
        if i and d["offset"] < images[i - 1]["offset"]:
            errors.append(f"IFD of image {i} lies before the IFD of image {i - 1}")
    all_data = [o for d in ifds for o in d["tags"].get(TILE_OFFSETS, d["tags"].get(STRIP_OFFSETS, [])) if o > 0]
    if all_data and max(d["offset"] for d in ifds) > min(all_data):
        errors.append("an IFD lies after the start of the image data")
    for i in range(1, len(images)):
        if first_data[i] and first_data[i - 1] and first_data[i] > first_data[i - 1]:
            errors.append(f"data of image {i} come after the data of the larger image {i - 1}")
    return errors


def _field(grid: GridSpec) -> tuple[np.ndarray, np.ndarray]:
    yy, xx = np.mgrid[0:grid.nrows, 0:grid.ncols]
    est = 300.0 + 0.01 * xx - 0.02 * yy + np.sin(xx / 40.0)
    est[:30, :40] = np.nan  # no data in a corner
    return est, np.sqrt(1.0 + xx + yy)


# -- the COG writer --------------------------------------------------------------------------------------------
def test_geotiff_is_a_cloud_optimized_geotiff_with_overviews(tmp_path):
    grid = GridSpec.from_bounds(610000, 4100000, 611400, 4101200, 2.0)  # 700 x 600 cells: larger than a tile
    est, std = _field(grid)
    path = write_geotiff(tmp_path / "AQ_head.tif", grid, [est, std], crs=CRS,
                         descriptions=["head estimate (m)", "kriging standard deviation"], units="m",
                         tags={"quantity": "head", "unit": "AQ"})
    assert cog_layout_errors(path) == []
    with rasterio.open(path) as src:
        assert src.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG"  # GDAL's own reading of the layout
        assert src.profile["tiled"] and (src.profile["blockxsize"], src.profile["blockysize"]) == (COG_BLOCK,) * 2
        assert src.compression.name.lower() == "deflate"
        assert src.tags(ns="IMAGE_STRUCTURE")["PREDICTOR"] == "3"  # floating-point predictor (TIFF Tech. Note 3)
        assert src.overviews(1) == [2, 4] and src.overviews(2) == [2, 4]  # down to one tile, as GDAL does
        assert src.descriptions == ("head estimate (m)", "kriging standard deviation")
        assert src.units == ("m", "m")
        assert src.tags()["quantity"] == "head" and src.tags()["unit"] == "AQ"
        assert PCRS.from_user_input(src.crs.to_wkt()) == PCRS.from_user_input(CRS)
        assert src.transform == grid.transform and src.nodata == NODATA
        back = src.read(1, masked=True)
        assert back.mask[:30, :40].all() and not back.mask[30:, :].any()  # NaN -> nodata
        assert src.read(1)[0, 0] == NODATA
        np.testing.assert_array_equal(back.filled(np.nan), est.astype("float32"))
        np.testing.assert_array_equal(src.read(2), std.astype("float32"))
        # an overview is the mean of the cells it covers, no-data cells left out (GDAL's AVERAGE)
        ov = src.read(2, out_shape=(grid.nrows // 2, grid.ncols // 2))
        ref = std.astype("float32").reshape(grid.nrows // 2, 2, grid.ncols // 2, 2).mean(axis=(1, 3))
        np.testing.assert_allclose(ov, ref, rtol=1e-6)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["AQ_head.tif"]  # no working copy left behind


def test_small_raster_is_a_cog_of_one_tile(tmp_path):
    grid = GridSpec.from_bounds(0, 0, 100, 80, 1.0)
    est, _ = _field(grid)
    path = write_geotiff(tmp_path / "s.tif", grid, [est], crs=CRS, units="ft")
    assert cog_layout_errors(path) == []
    with rasterio.open(path) as src:
        assert src.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG" and src.overviews(1) == []
        assert src.units == ("ft",) and src.descriptions == (None,)


def test_layout_check_rejects_a_plain_geotiff(tmp_path):
    """Control: a tiled GeoTIFF whose overviews were added after its data is not a COG; the reader says so."""
    grid = GridSpec.from_bounds(0, 0, 700, 600, 1.0)
    est, _ = _field(grid)
    plain = tmp_path / "plain.tif"
    with rasterio.open(plain, "w", driver="GTiff", width=grid.ncols, height=grid.nrows, count=1, dtype="float32",
                       crs=CRS, transform=grid.transform, tiled=True, blockxsize=256, blockysize=256) as dst:
        dst.write(np.nan_to_num(est).astype("float32"), 1)
        dst.build_overviews([2, 4])
    errors = cog_layout_errors(plain)
    assert errors and "no GDAL structural metadata right after the header" in errors
    with rasterio.open(plain) as src:
        assert src.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") != "COG"


def test_writer_refuses_bad_bands_and_leaves_the_old_file(tmp_path):
    grid = GridSpec.from_bounds(0, 0, 10, 10, 1.0)
    path = write_geotiff(tmp_path / "a.tif", grid, [np.ones(grid.shape)], crs=CRS)
    before = path.read_bytes()
    with pytest.raises(ParameterError, match=r"band 1 has shape \(3, 3\), the grid \(10, 10\)"):
        write_geotiff(path, grid, [np.ones((3, 3))], crs=CRS)
    with pytest.raises(ParameterError, match=r"units must give one entry per band \(2\); got 1"):
        write_geotiff(path, grid, [np.ones(grid.shape)] * 2, crs=CRS, units=["m"])
    with pytest.raises(ParameterError, match="overview_resampling must be one of"):
        write_geotiff(path, grid, [np.ones(grid.shape)], crs=CRS, overview_resampling="sum")
    with pytest.raises(ParameterError, match="at least one array"):
        write_geotiff(path, grid, [], crs=CRS)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.tif"]


# -- the grid rule -----------------------------------------------------------------------------------------------
def _mantissa(value: float) -> Decimal:
    d = Decimal(repr(value))
    return d.scaleb(-d.adjusted()).normalize()


def test_readable_cell_examples():
    # worked by hand: span / 200, then the largest of 1, 2, 2.5, 5 x 10^k not above it
    assert readable_cell(2400.0) == 10.0        # 12 -> 10
    assert readable_cell(400.0) == 2.0          # exactly 2
    assert readable_cell(1000.0) == 5.0         # exactly 5
    assert readable_cell(1100.0) == 5.0         # 5.5 -> 5
    assert readable_cell(560.0) == 2.5          # 2.8 -> 2.5
    assert readable_cell(37_000.0) == 100.0     # 185 -> 100
    assert readable_cell(0.6) == 0.0025         # 0.003 -> 0.0025
    assert readable_cell(4.4e6, cells_across=100) == 25_000.0  # 44,000 -> 25,000
    for bad in (0.0, -1.0, float("nan"), float("inf")):
        with pytest.raises(ParameterError, match="extent_span"):
            readable_cell(bad)
    with pytest.raises(ParameterError, match="cells_across"):
        readable_cell(100.0, cells_across=0)


def test_readable_cell_rule_over_many_spans():
    spans = 10.0 ** np.random.default_rng(3).uniform(-4, 8, 2000)
    for span in spans:
        cell = readable_cell(float(span))
        assert _mantissa(cell) in {Decimal(1), Decimal(2), Decimal("2.5"), Decimal(5)}, cell
        across = span / cell
        assert 200 * (1 - 1e-9) <= across < 400, (span, cell)  # never coarser than 1/200, under twice as fine


def test_snapped_extent_edges_are_whole_multiples_and_cover_the_bounds():
    rng = np.random.default_rng(5)
    for cell in (0.1, 2.5, 5.0, 20.0, 250.0, 1e-3):
        for _ in range(200):
            x0, y0 = rng.uniform(-5e6, 5e6, 2)
            w, h = rng.uniform(0, 1e4 * cell, 2) * rng.choice([0, 1], 2)
            bounds = (x0, y0, x0 + w, y0 + h)
            edges = snapped_extent(bounds, cell)
            step = Decimal(repr(cell))
            for e in edges:
                q = Decimal(repr(e)) / step
                assert abs(q - q.to_integral_value()) < Decimal("1e-6"), (e, cell)
            assert edges[0] <= bounds[0] + 1e-9 * cell and edges[1] <= bounds[1] + 1e-9 * cell
            assert edges[2] >= bounds[2] - 1e-9 * cell and edges[3] >= bounds[3] - 1e-9 * cell
            assert 1 <= round((edges[2] - edges[0]) / cell) <= math.ceil(w / cell) + 1
            assert 1 <= round((edges[3] - edges[1]) / cell) <= math.ceil(h / cell) + 1
    assert snapped_extent((12.34, 0.0, 13.0, 0.05), 0.1) == (12.3, 0.0, 13.0, 0.1)  # decimal edges, no 12.300...01


def test_grids_of_one_cell_line_up_whatever_their_bounds():
    a = GridSpec.from_bounds(610123.4, 4100456.7, 612345.6, 4102222.2, 2.5)
    b = GridSpec.from_bounds(609001.0, 4099999.9, 611000.0, 4101000.1, 2.5)
    for g in (a, b):
        assert (g.x0 / 2.5).is_integer() and (g.y0 / 2.5).is_integer()
    shift_cols = (b.x0 - a.x0) / 2.5
    shift_rows = (a.y0 - b.y0) / 2.5
    assert shift_cols.is_integer() and shift_rows.is_integer()
    # the same point falls in cells whose centres coincide
    p = np.array([[610500.3, 4100800.9]])
    (ra,), (ca,) = a.cell_of(p)
    (rb,), (cb,) = b.cell_of(p)
    assert a.x_centers()[ca] == b.x_centers()[cb] and a.y_centers()[ra] == b.y_centers()[rb]


# -- read_surface through the command line -----------------------------------------------------------------------
@pytest.fixture(scope="module")
def truth_surfaces(truth, truth_store, tmp_path_factory):
    """Head (kriging, IDW) and log-K surfaces of unit UD of the truth district (feet store), default grid."""
    from click.testing import CliRunner

    from hydroatlas.cli import main
    from truth_fixtures import copy_store

    folder = tmp_path_factory.mktemp("rasters")
    store = copy_store(truth_store, folder / "store.gpkg")
    out = {}
    for name, args in (("kriging", ["--window", truth.normal_window]),
                       ("idw", ["--method", "idw", "--window", truth.normal_window]),
                       ("logk", ["--quantity", "logk"])):
        out[name] = folder / name
        res = CliRunner().invoke(main, ["surface", str(store), "--unit", "UD", "--out", str(out[name]), *args],
                                 catch_exceptions=False)
        assert res.exit_code == 0, res.output
    # a pumping scenario on the kriged head surface (its rasters have one band and no std)
    res = CliRunner().invoke(main, ["drawdown", str(store), "--unit", "UD", "--days", "365", "-S", "1e-4",
                                    "--out", str(out["kriging"])], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    return store, out


def test_read_surface_matches_rasterio_and_carries_crs_units_and_selection(truth, truth_surfaces):
    import hydroatlas

    _, out = truth_surfaces
    tif = out["kriging"] / "UD_head.tif"
    side = json.loads((out["kriging"] / "UD_head.json").read_text())
    da = hydroatlas.read_surface(tif)
    assert da.dims == ("band", "y", "x") and list(da["band"].values) == ["estimate", "std"]
    with rasterio.open(tif) as src:
        est = src.read(1, masked=True).filled(np.nan)
        std = src.read(2, masked=True).filled(np.nan)
        xs, _ = rasterio.transform.xy(src.transform, np.zeros(src.width, int), np.arange(src.width))
        _, ys = rasterio.transform.xy(src.transform, np.arange(src.height), np.zeros(src.height, int))
        assert src.units == ("ft", "ft")  # head and its std in the store's length unit
        crs_file = PCRS.from_user_input(src.crs.to_wkt())
    np.testing.assert_array_equal(da.sel(band="estimate").values, est)
    np.testing.assert_array_equal(da.sel(band="std").values, std)
    np.testing.assert_allclose(da["x"].values, xs, rtol=0, atol=1e-6)
    np.testing.assert_allclose(da["y"].values, ys, rtol=0, atol=1e-6)
    assert np.isfinite(est).all()  # the district's domain polygon covers the whole grid
    # the CRS, by pyproj: the attribute, the CF grid-mapping coordinate, the store's CRS
    assert PCRS.from_wkt(da.attrs["crs"]) == crs_file == PCRS.from_user_input(truth.crs)
    assert PCRS.from_wkt(da["spatial_ref"].attrs["crs_wkt"]) == crs_file
    assert PCRS.from_cf(da["spatial_ref"].attrs) == crs_file
    assert da.attrs["units"] == "ft" and da.attrs["quantity"] == "head" and da.attrs["unit_code"] == "UD"
    assert da.attrs["window"] == truth.normal_window == side["window"]
    assert da.attrs["method"] == "kriging"
    assert json.loads(da.attrs["selection"]) == side["selection"]
    assert "licensed professional" in da.attrs["caution"]


def test_rioxarray_reads_the_crs_of_read_surface(truth_surfaces):
    """Reference library: rioxarray finds the CRS through the CF grid-mapping coordinate."""
    import rioxarray  # noqa: F401  (registers the .rio accessor)

    _, out = truth_surfaces
    tif = out["kriging"] / "UD_head.tif"
    da = read_surface(tif)
    with rasterio.open(tif) as src:
        assert PCRS.from_user_input(da.rio.crs.to_wkt()) == PCRS.from_user_input(src.crs.to_wkt())
        assert da.rio.transform() == src.transform
    ref = rioxarray.open_rasterio(tif, masked=True)
    np.testing.assert_array_equal(da.values, ref.values.astype(float))


def test_idw_surface_has_an_all_nan_std_band(truth_surfaces):
    _, out = truth_surfaces
    tif = out["idw"] / "UD_head.tif"
    with rasterio.open(tif) as src:
        assert src.count == 1 and src.units == ("ft",)
        est = src.read(1, masked=True).filled(np.nan)
    da = read_surface(tif)
    assert list(da["band"].values) == ["estimate", "std"] and da.attrs["method"] == "idw"
    np.testing.assert_array_equal(da.sel(band="estimate").values, est)
    assert np.isnan(da.sel(band="std").values).all()


def test_drawdown_rasters_are_cogs_in_store_units_with_an_all_nan_std(truth_surfaces):
    _, out = truth_surfaces
    for name, quantity in (("UD_drawdown.tif", "drawdown"), ("UD_head_drawdown.tif", "head after drawdown")):
        tif = out["kriging"] / name
        assert cog_layout_errors(tif) == []
        with rasterio.open(tif) as src:
            assert src.count == 1 and src.units == ("ft",)
            est = src.read(1, masked=True).filled(np.nan)
        da = read_surface(tif)
        assert da.attrs["quantity"] == quantity and da.attrs["units"] == "ft" and da.attrs["unit_code"] == "UD"
        np.testing.assert_array_equal(da.sel(band="estimate").values, est)
        assert np.isnan(da.sel(band="std").values).all()
        assert "licensed professional" in da.attrs["caution"]


def test_logk_and_gradient_band_units(truth, truth_surfaces):
    _, out = truth_surfaces
    with rasterio.open(out["logk"] / "UD_logk.tif") as src:
        assert src.units == (f"log10({truth.k_unit})",) * 2
    assert read_surface(out["logk"] / "UD_logk.tif").attrs["units"] == "log10(ft/d)"
    with rasterio.open(out["kriging"] / "UD_gradient.tif") as src:
        assert src.units == ("1", "degree")
        assert cog_layout_errors(Path(src.name)) == []
    with pytest.raises(ParameterError, match="gradient raster, not a surface"):
        read_surface(out["kriging"] / "UD_gradient.tif")


def test_surfaces_of_the_command_are_cogs_on_the_readable_snapped_grid(truth_surfaces):
    """Default grid: a readable cell, edges on whole multiples of it, covering every well used and the domain."""
    import pyogrio

    store, out = truth_surfaces
    for name, tail in (("kriging", "head"), ("logk", "logk")):
        tif = out[name] / f"UD_{tail}.tif"
        side = json.loads((out[name] / f"UD_{tail}.json").read_text())
        assert cog_layout_errors(tif) == []
        with rasterio.open(tif) as src:
            cell = src.res[0]
            assert _mantissa(cell) in {Decimal(1), Decimal(2), Decimal("2.5"), Decimal(5)}
            for edge in (src.bounds.left, src.bounds.bottom, src.bounds.right, src.bounds.top):
                assert (edge / cell).is_integer()
            bounds = src.bounds
        wells = pyogrio.read_dataframe(store, layer="wells").set_index("well_id").geometry
        springs = pyogrio.read_dataframe(store, layer="springs").set_index("spring_id").geometry
        points = pd.concat([wells, springs]).loc[side["wells"]]  # a spring may stand as a head point
        assert len(points) == side["n_points"] > 3
        assert (points.x >= bounds.left).all() and (points.x <= bounds.right).all()
        assert (points.y >= bounds.bottom).all() and (points.y <= bounds.top).all()
        areas = pyogrio.read_dataframe(store, layer="areas")
        domain = areas[areas["kind"] == "domain"]
        assert len(domain) == 1  # the district has one domain polygon; the grid is made on its bounds
        dx0, dy0, dx1, dy1 = domain.total_bounds
        assert bounds.left <= dx0 and bounds.bottom <= dy0 and bounds.right >= dx1 and bounds.top >= dy1
        assert bounds.right - bounds.left < dx1 - dx0 + 2 * cell and bounds.top - bounds.bottom < dy1 - dy0 + 2 * cell


def test_read_surface_of_a_written_grid(tmp_path):
    """No data become NaN; cell centres and the GDAL geotransform follow the grid; no sidecar, no sidecar keys."""
    grid = GridSpec.from_bounds(610000, 4100000, 610300, 4100200, 2.5)
    est, std = _field(grid)
    path = write_geotiff(tmp_path / "AQ_head.tif", grid, [est, std], crs=CRS, units="m",
                         descriptions=["head estimate (m)", "kriging standard deviation"],
                         tags={"quantity": "head", "unit": "AQ"})
    da = read_surface(path)
    np.testing.assert_array_equal(da.sel(band="estimate").values, est.astype("float32").astype(float))
    np.testing.assert_array_equal(da.sel(band="std").values, std.astype("float32").astype(float))
    assert np.isnan(da.values[0, :30, :40]).all()
    np.testing.assert_array_equal(da["x"].values, grid.x_centers())
    np.testing.assert_array_equal(da["y"].values, grid.y_centers())
    assert da["spatial_ref"].attrs["GeoTransform"].split() == [repr(v) for v in (grid.x0, 2.5, 0.0, grid.y0, 0.0, -2.5)]
    assert da.attrs["long_name"] == "head estimate (m)" and da.attrs["units"] == "m"
    assert "sidecar" not in da.attrs and "selection" not in da.attrs
    da.to_dataset(name="head").to_netcdf(tmp_path / "head.nc")  # attributes stay writable to netCDF
    import xarray as xr

    with xr.open_dataset(tmp_path / "head.nc") as back:
        assert PCRS.from_cf(back["spatial_ref"].attrs) == PCRS.from_user_input(CRS)


def test_read_surface_refuses_missing_and_foreign_files(tmp_path):
    with pytest.raises(ParameterError, match="no surface raster at"):
        read_surface(tmp_path / "none.tif")
    (tmp_path / "text.tif").write_text("not a raster")
    with pytest.raises(ParameterError, match="not a raster GDAL can read"):
        read_surface(tmp_path / "text.tif")
    grid = GridSpec.from_bounds(0, 0, 10, 10, 1.0)
    path = write_geotiff(tmp_path / "three.tif", grid, [np.ones(grid.shape)] * 3, crs=CRS)
    with pytest.raises(ParameterError, match="3 bands; a surface has an estimate and at most a std"):
        read_surface(path)
