"""Surfaces tile by tile on a Dask cluster, and written tile by tile (issue 15, SPEC 2.14).

A ``dask.distributed.LocalCluster`` of two worker processes (one thread each) runs for the whole session. The
checks compare the cluster's answers with this process's, which is the reference: the tile function is pure,
so the same tiles must give the same numbers to 1e-12 (common practice for a deterministic computation split
over processes; no outside source). The tile-by-tile mask and gradient are checked against the whole-grid
rules they replace (:func:`hydroatlas.interp.grid.mask_from_polygons`, :func:`~hydroatlas.interp.grid.
mask_from_buffer`, :func:`hydroatlas.assign.inside_extent`, :func:`hydroatlas.flow.grid_gradient`).

Where dask or distributed is missing the tests skip with the reason; HYDROATLAS_REQUIRE_ALL=1 (CI) makes that a
failure.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import subprocess
import sys
import textwrap

import numpy as np
import pyogrio
import pytest
import rasterio

from conftest import CRS, cli, require_all, write_csv
from hydroatlas.cli import main
from hydroatlas.errors import ParameterError

X0, Y0 = 610000.0, 4100000.0
WEST = X0 + 1200.0  # the aquifer AQ is absent at the wells west of this line
WINDOW = "2024-03-01/2024-03-31"


def head_field(x, y):
    """Invented head (m): a regional slope and a broad undulation, so kriging is not exact anywhere."""
    u, v = (x - X0) / 6000.0, (y - Y0) / 4000.0
    return 300.0 - 18.0 * u + 9.0 * v + 3.0 * np.sin(3.0 * u) * np.cos(2.0 * v)


# ---------------------------------------------------------------------------------------------- fixtures
def need_distributed():
    """The distributed package; a skip with the reason where it is missing, a failure in CI."""
    try:
        import distributed
    except ImportError as exc:
        if require_all():
            pytest.fail(f"the Dask tests cannot run: {exc} (pip install -e '.[test]' installs dask and distributed)")
        pytest.skip(f"Dask tests skipped: {exc}")
    return distributed


@pytest.fixture(scope="session")
def dask_cluster():
    cluster = need_distributed().LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0",
                           memory_limit="1GiB")
    yield cluster
    cluster.close()


@pytest.fixture(scope="session")
def address(dask_cluster) -> str:
    return dask_cluster.scheduler_address


@pytest.fixture(scope="session")
def client(dask_cluster):
    with need_distributed().Client(dask_cluster, set_as_default=False) as c:
        yield c


def _district(folder):
    """CSV files of an invented district: 44 wells, unit AQ absent west of WEST (TOP rests on BASE there)."""
    rng = np.random.default_rng(2026)
    xs = X0 + rng.uniform(0, 6000, 44)
    ys = Y0 + rng.uniform(0, 4000, 44)
    files = {
        "units": [["code", "name", "rank", "role"], ["TOP", "upper sand", 1, "aquifer"],
                  ["AQ", "middle gravel", 2, "aquifer"], ["BASE", "lower clay", 3, "aquitard"]],
        "wells": [["well_id", "x", "y", "ground_elev", "total_depth"]],
        "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
        "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
        "heads": [["well_id", "zone_id", "measured_at", "head"]],
        "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]],
    }
    for i, (x, y) in enumerate(zip(xs, ys)):
        w = f"D{i:02d}"
        files["wells"].append([w, f"{x:.2f}", f"{y:.2f}", 330, 150])
        if x < WEST:  # absent: the picks above and below its place touch
            files["picks"] += [[w, "TOP", 0, 50], [w, "BASE", 50, 150]]
            continue
        files["picks"] += [[w, "TOP", 0, 30], [w, "AQ", 30, 120], [w, "BASE", 120, 150]]
        files["zones"].append([w, "S", 60, 70])
        files["heads"].append([w, "S", "2024-03-15", f"{head_field(round(x, 2), round(y, 2)):.4f}"])
        files["ktests"].append([w, "S", "2024-02-01", "slug", f"{10 ** rng.normal(0.5, 0.4):.4f}", "m/d"])
    return {kind: write_csv(folder / f"{kind}.csv", rows) for kind, rows in files.items()}


@pytest.fixture(scope="module")
def district(tmp_path_factory):
    """Two stores of the district: ``plain`` (mask: a buffer around the data) and ``domain`` (a domain polygon)."""
    import geopandas as gpd
    import shapely

    from hydroatlas.store import create_store
    from hydroatlas.store.importers import import_file

    folder = tmp_path_factory.mktemp("dask_district")
    plain = folder / "plain.gpkg"
    store = create_store(plain, crs=CRS, length_unit="m")
    try:
        for kind, path in _district(folder).items():
            import_file(store, kind, path)
    finally:
        store.close()
    domain = folder / "domain.gpkg"
    shutil.copyfile(plain, domain)
    area = gpd.GeoDataFrame({"area_id": ["DOM"], "kind": ["domain"]},
                            geometry=[shapely.Polygon([(X0 - 200, Y0 + 300), (X0 + 5200, Y0 - 300),
                                                       (X0 + 6300, Y0 + 4200), (X0 + 900, Y0 + 3700)])], crs=CRS)
    area.to_file(folder / "domain_area.gpkg", driver="GPKG")
    from hydroatlas import open_store

    with open_store(domain) as s:
        import_file(s, "areas", folder / "domain_area.gpkg")
    return {"plain": plain, "domain": domain}


def _model(kind):
    from hydroatlas.interp import IDW, OrdinaryKriging, Variogram

    rng = np.random.default_rng(7)
    xy = rng.uniform(0, 100, (150, 2))
    z = np.sin(xy[:, 0] / 17.0) + 0.02 * xy[:, 1]
    if kind == "kriging":
        return OrdinaryKriging(Variogram("spherical", nugget=0.01, sill=1.0, range=45.0), neighbors=12).fit(xy, z)
    return IDW(2.0, neighbors=10).fit(xy, z)


def _read(path):
    with rasterio.open(path) as src:
        return [src.read(i, masked=True).astype(float).filled(np.nan) for i in range(1, src.count + 1)], src.tags()


def _assert_same(a, b):
    """Equal to 1e-12 with no-data in the same cells (float32 files: equal values read back the same)."""
    assert a.shape == b.shape
    np.testing.assert_array_equal(np.isnan(a), np.isnan(b))
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-12, equal_nan=True)


def _digest(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


# ---------------------------------------------------------------------------------------------- library
@pytest.mark.parametrize("kind", ["kriging", "idw"])
@pytest.mark.parametrize("how", ["address", "client"])
def test_predict_grid_on_dask_equals_this_process(kind, how, request):
    from hydroatlas.interp.grid import GridSpec, predict_grid

    scheduler = request.getfixturevalue(how)
    model = _model(kind)
    grid = GridSpec(-5.0, 105.0, 1.0, 110, 80)
    mask = np.ones(grid.shape, bool)
    mask[:30, :25] = False
    mask[70:, 60:] = False
    budget = 80 * 400 * 9  # 9 rows a tile: 13 tiles, so both workers get several
    local = predict_grid(model, grid, mask=mask, budget_bytes=budget)
    ticks = []
    remote = predict_grid(model, grid, mask=mask, scheduler=scheduler, budget_bytes=budget, progress=ticks.append)
    assert sum(ticks) == grid.nrows and len(ticks) == 13
    _assert_same(remote[0], local[0])
    assert np.isnan(remote[0][~mask]).all() and np.isfinite(remote[0][mask]).all()
    if kind == "kriging":
        _assert_same(remote[1], local[1])
        assert np.isfinite(remote[1][mask]).all()
    else:
        assert local[1] is None and remote[1] is None


def test_tiles_out_on_the_cluster_stay_within_in_flight(client):
    """The client never has more than ``in_flight`` tiles handed out and not yet taken back (memory bound)."""
    from hydroatlas.interp.grid import GridSpec, iter_tiles

    model = _model("idw")
    grid = GridSpec(0.0, 100.0, 1.0, 100, 50)
    handed = []

    def mask_fn(r0, r1):
        handed.append(r0)
        return np.ones((r1 - r0, grid.ncols), bool)

    taken = []
    for r0, r1, est, std in iter_tiles(model, grid, mask_fn=mask_fn, scheduler=client, in_flight=3,
                                       budget_bytes=50 * 400 * 4):
        taken.append(r0)
        assert len(handed) - len(taken) <= 3  # besides the tile in hand
        assert est.shape == (r1 - r0, 50) and std is None
    assert sorted(taken) == sorted(handed) == list(range(0, 100, 4))


def test_predict_to_geotiff_on_dask_writes_the_local_numbers(client, tmp_path):
    from hydroatlas.interp.grid import GridSpec, predict_grid
    from hydroatlas.workflows.surface_tiles import predict_to_geotiff

    model = _model("kriging")
    grid = GridSpec(-5.0, 105.0, 1.0, 110, 80)
    mask = np.ones(grid.shape, bool)
    mask[:, :7] = False
    local = predict_grid(model, grid, mask=mask)
    path = predict_to_geotiff(model, grid, tmp_path / "k.tif", crs=CRS, mask_fn=lambda r0, r1: mask[r0:r1],
                              scheduler=client, budget_bytes=80 * 400 * 10, units="m",
                              descriptions=["estimate", "std"])
    (est, std), _ = _read(path)
    _assert_same(est, local[0].astype("float32").astype(float))
    _assert_same(std, local[1].astype("float32").astype(float))
    with rasterio.open(path) as src:
        assert src.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG"
        assert src.units == ("m", "m") and src.descriptions == ("estimate", "std")
    assert [p.name for p in tmp_path.iterdir()] == ["k.tif"]  # no working copy left


def test_predict_to_geotiff_leaves_nothing_when_it_fails(client, tmp_path):
    from hydroatlas.interp.grid import GridSpec
    from hydroatlas.workflows.surface_tiles import predict_to_geotiff

    def refuse():
        raise ParameterError("refused on purpose")

    with pytest.raises(ParameterError, match="refused on purpose"):
        predict_to_geotiff(_model("idw"), GridSpec(0.0, 50.0, 1.0, 50, 50), tmp_path / "x.tif", crs=CRS,
                           scheduler=client, budget_bytes=50 * 400 * 10, before_close=refuse)
    assert list(tmp_path.iterdir()) == []


def test_workers_and_scheduler_together_are_refused(address):
    from hydroatlas.interp.grid import GridSpec, predict_grid

    with pytest.raises(ParameterError, match="give workers= .* or scheduler= .*, not both"):
        predict_grid(_model("idw"), GridSpec(0.0, 10.0, 1.0, 10, 10), workers=2, scheduler=address)


def test_gradient_from_tiles_in_any_order_equals_the_whole_grid():
    """The tile-wise gradient (one row of each neighbour tile) equals :func:`flow.grid_gradient` of the whole
    grid, NaN cells and edges included, and the arrow samples are the whole grid's cells."""
    from hydroatlas import flow
    from hydroatlas.interp.grid import GridSpec
    from hydroatlas.workflows.surface_tiles import GradientTiles
    from hydroatlas.workflows.surfaces import arrow_cells

    grid = GridSpec(0.0, 570.0, 10.0, 57, 40)
    rng = np.random.default_rng(3)
    yy, xx = np.mgrid[0:57, 0:40]
    head = 100.0 - 0.03 * xx + 0.02 * yy + 0.5 * np.sin(xx / 5.0) + rng.normal(0, 0.01, grid.shape)
    head[10:14, 5:9] = np.nan
    head[20, :] = np.nan  # a whole row without data, on a tile edge
    head[:, 0] = np.nan

    class Sink:
        def __init__(self):
            self.bands = [np.full(grid.shape, -1.0), np.full(grid.shape, -1.0)]

        def write(self, row0, bands):
            for out, b in zip(self.bands, bands):
                out[row0:row0 + len(b)] = b

    edges = [0, 6, 7, 20, 21, 33, 50, 57]
    tiles = list(zip(edges[:-1], edges[1:]))
    order = rng.permutation(len(tiles))
    sink = Sink()
    grad = GradientTiles(grid, sink, vertical_per_horizontal=0.5, arrows_across=9)
    for k in order:
        r0, r1 = tiles[k]
        grad.feed(r0, r1, head[r0:r1])
    mag, az = flow.grid_gradient(head, grid.cell, vertical_per_horizontal=0.5)
    np.testing.assert_array_equal(sink.bands[0], mag)
    np.testing.assert_array_equal(sink.bands[1], az)
    rows, cols, m, a, h = grad.arrows()
    want_r, want_c = arrow_cells(grid, 9)
    np.testing.assert_array_equal(rows, want_r)
    np.testing.assert_array_equal(cols, want_c)
    np.testing.assert_array_equal(m, mag[want_r, want_c])
    np.testing.assert_array_equal(h, head[want_r, want_c])


def test_gradient_tiles_refuse_to_finish_with_rows_missing():
    from hydroatlas.interp.grid import GridSpec
    from hydroatlas.workflows.surface_tiles import GradientTiles

    grid = GridSpec(0.0, 100.0, 10.0, 10, 10)
    grad = GradientTiles(grid, sink=None, vertical_per_horizontal=1.0)
    grad.feed(5, 10, np.ones((5, 10)))
    with pytest.raises(RuntimeError, match="reached row 0 of 10"):
        grad.arrows()


def test_tile_masks_equal_the_whole_grid_rules(district):
    """The mask made tile by tile equals the whole-grid rules: polygon, buffer, and the unit extent."""
    import shapely

    from hydroatlas import assign, open_store
    from hydroatlas.interp.grid import GridSpec, mask_from_buffer, mask_from_polygons
    from hydroatlas.study import Study
    from hydroatlas.workflows.surface_tiles import SurfaceMask

    with open_store(district["domain"]) as s:
        study = Study.of(s)
        domain = study.domain("AQ")
        pres = study.presence("AQ")
        xy = study.wells[["x", "y"]].to_numpy(float)
    grid = GridSpec.from_bounds(*domain.total_bounds, 75.0, crs=CRS)
    ext = assign.inside_extent(pres, grid.centers()).reshape(grid.shape)
    for kwargs, area in (({"polygons": domain.geometry}, mask_from_polygons(grid, domain.geometry)),
                         ({"points": xy, "distance": 900.0}, mask_from_buffer(grid, xy, 900.0))):
        cells = SurfaceMask(grid, presences=[pres], **kwargs)
        tiles = [cells(r0, min(grid.nrows, r0 + 11)) for r0 in range(0, grid.nrows, 11)]
        np.testing.assert_array_equal(np.vstack(tiles), area & ext)
        assert cells.cells_in_area == area.sum() and cells.cells_kept == (area & ext).sum()
        assert cells.cells_removed == (area & ~ext).sum() > 0
    assert shapely.contains_xy(domain.union_all(), xy[:, 0], xy[:, 1]).any()


# ---------------------------------------------------------------------------------------------- workflow
@pytest.mark.parametrize("which", ["plain", "domain"])
def test_streamed_surface_equals_the_in_memory_one(district, which, tmp_path, monkeypatch):
    """build_surface written tile by tile (forced: STREAM_CELLS 0, 7 rows a tile) gives the files of the
    in-memory path: head and std, gradient raster, flow arrows, and the sidecar's mask and extent figures."""
    from hydroatlas import open_store, workflows
    from hydroatlas.interp import grid as grid_module
    from hydroatlas.workflows import surface_tiles

    def run(out):
        with open_store(district[which]) as s:
            return workflows.build_surface(s, "AQ", "head", method="kriging", window=WINDOW, cell=100.0, out=out)

    whole = run(tmp_path / "whole")
    monkeypatch.setattr(surface_tiles, "STREAM_CELLS", 0)
    monkeypatch.setattr(grid_module, "rows_per_tile", lambda grid, *a, **k: 7)
    tiled = run(tmp_path / "tiled")
    assert whole["grid"] == tiled["grid"] and whole["grid"]["nrows"] > 21
    for name in ("AQ_head.tif", "AQ_gradient.tif"):
        (a, tags_a), (b, tags_b) = _read(tmp_path / "whole" / name), _read(tmp_path / "tiled" / name)
        assert len(a) == len(b) == 2 and tags_a == tags_b
        for band_a, band_b in zip(a, b):
            _assert_same(band_b, band_a)
    assert np.isfinite(a[0]).sum() > 100
    assert whole["mask"] == tiled["mask"] and whole["extent"] == tiled["extent"]
    assert tiled["extent"]["applied"] is True and tiled["extent"]["cells_removed"] > 0
    arrows = [pyogrio.read_dataframe(tmp_path / f / "layers.gpkg", layer="flow_arrows") for f in ("whole", "tiled")]
    assert len(arrows[0]) > 5
    np.testing.assert_allclose(arrows[1][["azimuth", "gradient", "head"]].to_numpy(),
                               arrows[0][["azimuth", "gradient", "head"]].to_numpy(), rtol=0, atol=1e-12)
    assert list(arrows[0].geometry.x) == list(arrows[1].geometry.x)


@pytest.fixture
def cluster_runs(monkeypatch):
    """The number of tile runs that went to a Dask cluster (the real function, counted)."""
    from hydroatlas.interp import dask_tiles

    runs = []
    real = dask_tiles.cluster_tiles

    def counted(*args, **kwargs):
        runs.append(args[2].shape)  # the grid's shape
        return real(*args, **kwargs)

    monkeypatch.setattr(dask_tiles, "cluster_tiles", counted)
    return runs


def test_cli_scheduler_writes_the_local_geotiff(district, address, tmp_path, runner, cluster_runs):
    """`surface --scheduler ADDRESS` writes the values `surface` writes locally (kriged head, domain polygon)."""
    args = ["surface", district["domain"], "--unit", "AQ", "--window", WINDOW, "--cell", 100]
    res = cli(runner, *args, "--out", tmp_path / "local")
    assert res.exit_code == 0, res.output
    assert cluster_runs == []
    res = cli(runner, *args, "--out", tmp_path / "dask", "--scheduler", address, "--format", "json")
    assert res.exit_code == 0, res.output
    assert len(cluster_runs) == 1
    assert json.loads(res.stdout)["files"]["raster"].endswith("AQ_head.tif")
    for name in ("AQ_head.tif", "AQ_gradient.tif"):
        (a, _), (b, _) = _read(tmp_path / "local" / name), _read(tmp_path / "dask" / name)
        assert len(a) == len(b) == 2
        for band_a, band_b in zip(a, b):
            _assert_same(band_b, band_a)
    assert np.isfinite(a[0]).sum() > 100
    local = json.loads((tmp_path / "local" / "AQ_head.json").read_text())
    remote = json.loads((tmp_path / "dask" / "AQ_head.json").read_text())
    assert local["mask"] == remote["mask"] and local["extent"] == remote["extent"]
    assert local["variogram"] == remote["variogram"]


def test_scheduler_file_from_the_environment(district, address, tmp_path, runner, cluster_runs):
    """HYDROATLAS_SCHEDULER stands for --scheduler, here naming a scheduler file (IDW log K surface)."""
    args = ["surface", str(district["plain"]), "--unit", "AQ", "--quantity", "logk", "--method", "idw",
            "--cell", "150"]
    res = runner.invoke(main, args + ["--out", str(tmp_path / "a")])
    assert res.exit_code == 0, res.output
    assert cluster_runs == []
    scheduler_file = tmp_path / "scheduler.json"
    scheduler_file.write_text(json.dumps({"type": "Scheduler", "address": address}))
    res = runner.invoke(main, args + ["--out", str(tmp_path / "b")], env={"HYDROATLAS_SCHEDULER": str(scheduler_file)})
    assert res.exit_code == 0, res.output
    assert len(cluster_runs) == 1
    (a, _), (b, _) = _read(tmp_path / "a" / "AQ_logk.tif"), _read(tmp_path / "b" / "AQ_logk.tif")
    assert len(a) == len(b) == 1  # IDW: no std band
    _assert_same(b[0], a[0])
    assert np.isfinite(a[0]).sum() > 100


@pytest.mark.parametrize("bad, message", [
    ("tcp://127.0.0.1:1", "no Dask scheduler answers at tcp://127.0.0.1:1 (connection refused); check --scheduler"),
    ("nonsense://here", "--scheduler 'nonsense://here' has the unknown scheme 'nonsense'"),
    ("127.0.0.1", "--scheduler '127.0.0.1' is not a Dask address"),
    ("missing-scheduler.json", "no scheduler file at missing-scheduler.json (--scheduler)"),
])
def test_a_bad_scheduler_is_exit_2_and_changes_nothing(district, bad, message, tmp_path, runner):
    store = tmp_path / "store.gpkg"
    shutil.copyfile(district["plain"], store)
    before = _digest(store)
    res = cli(runner, "surface", store, "--unit", "AQ", "--window", WINDOW, "--scheduler", bad,
              "--out", tmp_path / "out")
    assert res.exit_code == 2, res.output
    assert f"hydroatlas: error: {message}" in res.stderr
    assert "Traceback" not in res.output
    assert _digest(store) == before and not (tmp_path / "out").exists()


def test_without_dask_a_scheduler_names_the_extra(monkeypatch):
    from hydroatlas.interp import dask_tiles

    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(ParameterError, match=r"needs the optional packages dask and distributed; install them "
                                             r"with pip install 'hydroatlas\[dask\]'") as info:
        dask_tiles.connect("tcp://127.0.0.1:8786")
    assert info.value.param == "scheduler"


def test_help_and_local_surfaces_do_not_need_dask():
    """--help and the local path import no dask: a fresh interpreter where importing dask fails."""
    code = textwrap.dedent("""
        import contextlib, io, sys
        sys.modules["dask"] = None
        sys.modules["distributed"] = None
        from hydroatlas.cli import main
        with contextlib.redirect_stdout(io.StringIO()) as text:
            try:
                main(["surface", "--help"], prog_name="hydroatlas")
            except SystemExit as exc:
                assert exc.code == 0, exc.code
        assert "--scheduler" in text.getvalue() and "HYDROATLAS_SCHEDULER" in text.getvalue()
        import numpy as np
        from hydroatlas.interp import IDW
        from hydroatlas.interp.grid import GridSpec, predict_grid
        import hydroatlas.workflows.surface_tiles, hydroatlas.workflows.surfaces
        xy = np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0], [10.0, 10.0]])
        est, std = predict_grid(IDW(2.0).fit(xy, [1.0, 2.0, 3.0, 4.0]), GridSpec(0.0, 10.0, 1.0, 10, 10))
        assert np.isfinite(est).all() and std is None
        print("ok")
        """)
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip() == "ok"


def test_a_scheduler_file_without_an_address_is_refused(tmp_path):
    from hydroatlas.interp import dask_tiles

    need_distributed()
    bad = tmp_path / "scheduler.json"
    bad.write_text(json.dumps({"type": "Scheduler"}))
    with pytest.raises(ParameterError, match=r"the scheduler file .*scheduler.json names no address; check "
                                             r"scheduler="):
        dask_tiles.connect(str(bad))
    bad.write_text("not json")
    with pytest.raises(ParameterError, match="cannot be read as a Dask scheduler file"):
        dask_tiles.connect(str(bad))


def test_a_cluster_without_workers_is_refused(monkeypatch):
    """A scheduler with no worker: a clear error after a wait, not a hang (the wait shortened to 1 s here)."""
    distributed = need_distributed()
    from hydroatlas.interp import dask_tiles
    from hydroatlas.interp.grid import GridSpec, predict_grid

    monkeypatch.setattr(dask_tiles, "WORKER_WAIT_S", 1.0)
    with distributed.LocalCluster(n_workers=0, processes=False, dashboard_address=":0") as empty:
        with pytest.raises(ParameterError, match=r"the Dask cluster at .* has no worker \(waited 1 s\)"):
            predict_grid(_model("idw"), GridSpec(0.0, 10.0, 1.0, 10, 10), scheduler=empty.scheduler_address)


def test_a_mask_of_the_wrong_shape_is_refused():
    from hydroatlas.interp.grid import GridSpec, iter_tiles

    grid = GridSpec(0.0, 10.0, 1.0, 10, 10)
    tiles = iter_tiles(_model("idw"), grid, mask_fn=lambda r0, r1: np.ones((r1 - r0, 3), bool))
    with pytest.raises(ParameterError, match=r"mask_fn\(0, 10\) gave shape \(10, 3\); expected \(10, 10\)"):
        list(tiles)


def test_geotiff_stream_refuses_blocks_that_do_not_fit(tmp_path):
    from hydroatlas.export.rasters import geotiff_stream
    from hydroatlas.interp.grid import GridSpec

    grid = GridSpec(0.0, 10.0, 1.0, 10, 8)
    with pytest.raises(ParameterError, match="count= must be a whole number >= 1; got 0"):
        with geotiff_stream(tmp_path / "a.tif", grid, 0, crs=CRS):
            pass
    with pytest.raises(ParameterError, match=r"row0= 8 with 3 rows falls outside the grid's 10 rows"):
        with geotiff_stream(tmp_path / "b.tif", grid, 1, crs=CRS) as sink:
            sink.write(8, [np.zeros((3, 8))])
    with pytest.raises(ParameterError, match=r"band 1 block has shape \(3, 7\); expected \(rows, 8\)"):
        with geotiff_stream(tmp_path / "c.tif", grid, 1, crs=CRS) as sink:
            sink.write(0, [np.zeros((3, 7))])
    with pytest.raises(ParameterError, match=r"bands must give one array per band \(2\); got 1"):
        with geotiff_stream(tmp_path / "d.tif", grid, 2, crs=CRS) as sink:
            sink.write(0, [np.zeros((3, 8))])
    assert list(tmp_path.iterdir()) == []  # nothing left behind by a refused stream
    with geotiff_stream(tmp_path / "e.tif", grid, 1, crs=CRS, units="m") as sink:  # rows in any order
        sink.write(5, [np.full((5, 8), 2.0)])
        sink.write(0, [np.where(np.eye(5, 8) > 0, np.nan, 1.0)])
    (band,), _ = _read(tmp_path / "e.tif")
    assert np.isnan(band[:5][np.eye(5, 8) > 0]).all() and (band[:5][np.eye(5, 8) == 0] == 1.0).all()
    assert (band[5:] == 2.0).all()


def test_a_worker_without_hydroatlas_gives_one_clear_error(tmp_path):
    """A worker that cannot import hydroatlas (blocked by a preload script): one HydroatlasError naming the cause."""
    from hydroatlas.errors import HydroatlasError
    from hydroatlas.interp.grid import GridSpec, predict_grid

    distributed = need_distributed()
    preload = tmp_path / "no_hydroatlas.py"
    preload.write_text("import sys\nsys.modules['hydroatlas'] = None\n")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=":0",
                                  preload=[str(preload)]) as bare:
        with pytest.raises(HydroatlasError, match=r"could not be sent to the workers \(.*No module named "
                                                  r"'hydroatlas.*every worker needs hydroatlas installed"):
            predict_grid(_model("idw"), GridSpec(0.0, 10.0, 1.0, 10, 10), scheduler=bare.scheduler_address)
