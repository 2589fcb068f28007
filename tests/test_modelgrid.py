"""`hydroatlas grid`: NetCDF-CF and plain arrays, read back with xarray and with GDAL (rasterio)."""

import json
import math

import numpy as np
import pytest
import rasterio
import xarray as xr
from pyproj import CRS as PCRS

from conftest import CRS, cli, write_csv

X0, Y0 = 610000.0, 4100000.0


@pytest.fixture
def layered_store(empty_store, tmp_path, runner):
    rng = np.random.default_rng(8)
    rows = {"units": [["code", "name", "rank", "role"], ["AQ", "upper", 1, "aquifer"], ["AT", "tight", 2, "aquitard"],
                      ["LO", "lower", 3, "aquifer"], ["NOPE", "never picked", 4, "other"]],
            "wells": [["well_id", "x", "y", "ground_elev", "total_depth"]],
            "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
            "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
            "heads": [["well_id", "zone_id", "measured_at", "head"]],
            "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]]}
    for i in range(16):
        w = f"W{i:02d}"
        x, y = X0 + 300 + 600 * (i % 4) + rng.uniform(-50, 50), Y0 + 300 + 600 * (i // 4) + rng.uniform(-50, 50)
        rows["wells"].append([w, f"{x:.2f}", f"{y:.2f}", 400, 300])
        if i == 5:  # the aquitard is missing here: a pinch-out
            rows["picks"] += [[w, "AQ", 0, 100], [w, "LO", 100, 250]]
        else:
            rows["picks"] += [[w, "AQ", 0, 100], [w, "AT", 100, 120], [w, "LO", 120, 250]]
        rows["zones"] += [[w, "U", 40, 50], [w, "L", 200, 210]]
        rows["heads"] += [[w, "U", "2024-01-01", f"{390 - 0.002 * (x - X0):.6f}"],
                          [w, "L", "2024-01-01", f"{370 - 0.002 * (x - X0):.6f}"]]
        rows["ktests"] += [[w, "U", "2024-01-01", "slug", f"{10 ** rng.normal(0.5, 0.2):.4f}", "m/d"],
                           [w, "L", "2024-01-01", "slug", f"{10 ** rng.normal(-0.5, 0.2):.4f}", "m/d"]]
    rows["zones"].append(["W00", "T", 105, 115])
    rows["ktests"].append(["W00", "T", "2024-01-01", "packer", "1e-9", "m/s"])
    for kind, r in rows.items():
        res = cli(runner, "import", empty_store, kind, write_csv(tmp_path / f"{kind}.csv", r))
        assert res.exit_code == 0, res.output
    out = tmp_path / "model"
    res = cli(runner, "surface", empty_store, "--unit", "AQ", "--method", "uk", "--sill", 1, "--range", 2000,
              "--variogram", "exponential", "--cell", 50, "--out", out)
    assert res.exit_code == 0, res.output
    return empty_store, out


def _stats(store):
    from hydroatlas import open_store, workflows

    with open_store(store) as s:
        return {r["unit"]: r for r in workflows.unit_stats(s, k_unit="m/d")}


def test_grid_netcdf_and_arrays(layered_store, runner):
    store, out = layered_store
    nc = out / "model.nc"
    res = cli(runner, "grid", store, "--cell", 100, "--layers", "AQ,AT,LO", "--kv-ratio", 5,
              "--min-thickness", 2, "--out", nc)
    assert res.exit_code == 0, res.output
    ds = xr.open_dataset(nc)
    assert list(ds["unit_code"].values) == ["AQ", "AT", "LO"]
    # CF-1.8 attributes, checked directly (no CF checker installs cleanly without the udunits C library)
    assert ds.attrs["Conventions"] == "CF-1.8" and "hydroatlas store" in ds.attrs["source"]
    assert "model_grid" in ds.attrs["history"]
    for name in ("top", "bottom", "thickness", "kh", "kv", "start_head", "pinched", "head_borrowed", "active"):
        assert "units" in ds[name].attrs and ds[name].attrs["grid_mapping"] == "crs", name
    assert PCRS.from_wkt(ds["crs"].attrs["crs_wkt"]) == PCRS.from_user_input(CRS)
    assert ds["x"].attrs["standard_name"] == "projection_x_coordinate" and ds["x"].attrs["units"] == "m"
    assert ds["kh"].attrs["units"] == "m/d"
    top, bottom, thick = ds["top"].values, ds["bottom"].values, ds["thickness"].values
    active = ds["active"].values.astype(bool)
    assert np.allclose(top[0], 400.0)  # ground elevation is 400 at every well
    assert np.allclose(top[1:], bottom[:-1])  # each top is the bottom of the layer above
    assert (thick[:, active] >= 2 - 1e-9).all()
    # at each well with complete picks, the layer elevations of its cell match the picks (400-300, 300-280,
    # 280-150) within the cell's own variation (the largest change to a neighbouring cell: a cell-size tolerance)
    from hydroatlas import open_store

    with open_store(store) as s:
        wells = s.read("wells").set_index("well_id")
    xs, ys = ds["x"].values, ds["y"].values
    for wid, w in wells.iterrows():
        if wid == "W05":
            continue
        c, r = int(np.argmin(np.abs(xs - w.x))), int(np.argmin(np.abs(ys - w.y)))
        for k, expect in enumerate((300.0, 280.0, 150.0)):
            block = bottom[k, max(r - 1, 0):r + 2, max(c - 1, 0):c + 2]
            tol = float(np.abs(block - bottom[k, r, c]).max()) + 1e-6
            assert abs(bottom[k, r, c] - expect) <= tol, (wid, k, bottom[k, r, c], tol)
    assert np.allclose(bottom[0], 300.0)
    assert ds["pinched"].values[1].sum() > 0 and ds["pinched"].values[0].sum() == 0
    stats = _stats(store)
    assert np.allclose(ds["kh"].values[0], stats["AQ"]["k_geomean"])
    assert np.allclose(ds["kv"].values[0], stats["AQ"]["k_geomean"] / 5)
    assert np.allclose(ds["kv"].values[1], ds["kh"].values[1])  # aquitard: its tests stand for K_v
    assert ds["head_borrowed"].values[2].all() and not ds["head_borrowed"].values[0].any()
    # GDAL's netCDF driver reads the same arrays and georeferencing
    with rasterio.open(f"netcdf:{nc}:top") as r:
        assert r.count == 3 and PCRS.from_user_input(r.crs.to_wkt()) == PCRS.from_user_input(CRS)
        assert r.transform.a == 100 and r.transform.e == -100
        assert r.transform.c == pytest.approx(float(ds["x"].values[0]) - 50)
        assert np.allclose(r.read(3), top[2])
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["shape"] == {"layers": 3, "rows": top.shape[1], "cols": top.shape[2]}
    assert manifest["units"]["kh"] == "m/d" and "per day" in manifest["k_note"]
    f = manifest["files"]["bottom"][1]
    assert np.allclose(np.load(out / f["npy"]), bottom[1])
    assert np.allclose(np.loadtxt(out / f["txt"]), bottom[1], rtol=1e-5)


def test_rotated_grid(layered_store, runner):
    store, out = layered_store
    nc = out / "rot.nc"
    res = cli(runner, "grid", store, "--cell", 100, "--origin", f"{X0},{Y0}", "--shape", "20,25", "--rotation", 30,
              "--layers", "AQ,AT,LO", "--out", nc)
    assert res.exit_code == 0, res.output
    ds = xr.open_dataset(nc)
    x, y = ds["x"].values, ds["y"].values
    assert x.shape == (20, 25)
    # the last row's first cell centre lies at (50, 50) along the rotated axes from the origin
    t = math.radians(30)
    assert x[-1, 0] == pytest.approx(X0 + 50 * math.cos(t) - 50 * math.sin(t))
    assert y[-1, 0] == pytest.approx(Y0 + 50 * math.sin(t) + 50 * math.cos(t))
    assert {"x", "y"} <= set(ds["top"].coords)


def test_grid_bad_input(layered_store, runner):
    store, out = layered_store
    cases = [(["--cell", 0.5], "more than the maximum"),
             (["--cell", 100, "--rotation", 15], "needs --origin"),
             (["--cell", 100, "--layers", "AQ,NOPE"], "no picks anywhere"),
             (["--cell", 100, "--layers", "LO,AQ"], "stratigraphic order"),
             (["--cell", 100, "--origin", f"{X0},{Y0}"], "--shape"),
             (["--cell", 100, "--origin", "a,b", "--shape", "2,2"], "X,Y")]
    for args, message in cases:
        res = cli(runner, "grid", store, "--out", out / "bad.nc", *args)
        assert res.exit_code == 2, (args, res.output)
        assert message in res.output, (args, res.output)
