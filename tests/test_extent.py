"""Unit extent from the picks: presence per well, the extent polygon, masked surfaces, maps and model grids.

The district below is invented and built by hand (not a check against the outside world): twelve wells on
a 4 x 3 grid 1000 m apart; unit PER lies only under the east half (its picks are at the six east wells, and
at the six west wells the picks of SOIL above and SH below touch). The extent polygon is checked against
the nearest-neighbour rule evaluated independently with scipy's cKDTree (reference library), and the
masked cells against the cell geometry (a cell is west when its centre is west of the halfway line).
"""

import json

import numpy as np
import pandas as pd
import pytest
import rasterio
import shapely
from scipy.spatial import cKDTree

from conftest import CRS, cli, write_csv
from hydroatlas.assign import inside_extent, presence_extent, unit_extent, unit_presence

X0, Y0 = 610000.0, 4100000.0
MID = X0 + 2000.0  # halfway between the east-most west wells and the west-most east wells

UNITS = pd.DataFrame({"code": ["SOIL", "PER", "SH", "DEEP"], "name": ["cover", "perched", "shale", "deep"],
                      "rank": [1, 2, 3, 4], "role": ["other", "aquifer", "aquitard", "aquifer"],
                      "parent": [None] * 4})


def _grid_wells():
    """(well_id, x, y, east) of the twelve grid wells."""
    out = []
    for i in range(4):
        for j in range(3):
            x, y = X0 + 500 + 1000 * i, Y0 + 500 + 1000 * j
            out.append((f"W{i}{j}", x, y, i >= 2))
    return out


def _tables():
    wells, picks = [], []
    for wid, x, y, east in _grid_wells():
        wells.append((wid, x, y, 500.0, 150.0))
        if east:
            picks += [(wid, "SOIL", 0, 10), (wid, "PER", 10, 40), (wid, "SH", 40, 50), (wid, "DEEP", 50, 150)]
        else:
            picks += [(wid, "SOIL", 0, 15), (wid, "SH", 15, 25), (wid, "DEEP", 25, 150)]
    wells += [("SHALLOW", X0 + 1000, Y0 + 1000, 500.0, 8.0), ("NOPICKS", X0 + 3000, Y0 + 1500, 500.0, 60.0)]
    picks.append(("SHALLOW", "SOIL", 0, 8))
    return (pd.DataFrame(wells, columns=["well_id", "x", "y", "ground_elev", "total_depth"]),
            pd.DataFrame(picks, columns=["well_id", "unit", "top_depth", "bottom_depth"]))


def test_presence_rules():
    """Present with a pick, absent where the picks above and below touch, unknown without a log (common practice)."""
    wells, picks = _tables()
    pres = unit_presence(picks, wells, UNITS, "PER").set_index("well_id")
    for wid, _, _, east in _grid_wells():
        assert bool(pres.loc[wid, "present"]) is east, wid
        assert ("pick of thickness 30" if east else "SOIL above and SH below touch") in pres.loc[wid, "reason"]
    assert pd.isna(pres.loc["SHALLOW", "present"]) and "no pick below" in pres.loc["SHALLOW", "reason"]
    assert pd.isna(pres.loc["NOPICKS", "present"]) and pres.loc["NOPICKS", "reason"] == "no picks"
    # SH and DEEP are picked at every grid well: present everywhere, no extent
    assert unit_presence(picks, wells, UNITS, "SH")["present"].sum() == 12
    assert unit_extent(picks, wells, UNITS, "SH") is None


def test_presence_ground_gap_zero_thickness_and_parent():
    """The ground tops the log; an unlogged gap leaves it unknown; a zero-thickness pick is absent."""
    wells = pd.DataFrame([("A", 0.0, 0.0), ("B", 1.0, 0.0), ("C", 2.0, 0.0), ("D", 3.0, 0.0)],
                         columns=["well_id", "x", "y"])
    picks = pd.DataFrame([("A", "SH", 0, 10), ("A", "DEEP", 10, 50),     # log starts in SH at the ground
                          ("B", "SOIL", 0, 5), ("B", "SH", 9, 20),        # 4 unlogged between SOIL and SH
                          ("C", "SOIL", 0, 5), ("C", "PER", 5, 5), ("C", "SH", 5, 9),
                          ("D", "SOIL", 0, 5), ("D", "SH", 5.004, 9)],    # within the 0.01 tolerance
                         columns=["well_id", "unit", "top_depth", "bottom_depth"])
    soil = unit_presence(picks, wells, UNITS, "SOIL").set_index("well_id")
    assert not soil.loc["A", "present"] and "ground" in soil.loc["A", "reason"]
    per = unit_presence(picks, wells, UNITS, "PER").set_index("well_id")
    assert not per.loc["A", "present"]
    assert pd.isna(per.loc["B", "present"]) and "unlogged gap of 4" in per.loc["B", "reason"]
    assert not per.loc["C", "present"] and per.loc["C", "reason"] == "pick of zero thickness"
    assert not per.loc["D", "present"]
    assert pd.isna(unit_presence(picks, wells, UNITS, "PER", tolerance=0.001).set_index("well_id")
                   .loc["D", "present"])
    # a parent unit is present where any of its sub-units is; a parent pick does not resolve a sub-unit
    units = pd.DataFrame({"code": ["TOP", "P", "P1", "P2", "BASE"], "name": list("abcde"), "rank": [1, 2, 3, 4, 5],
                          "role": ["other", "aquifer", "aquifer", "aquifer", "aquifer"],
                          "parent": [None, None, "P", "P", None]})
    picks = pd.DataFrame([("A", "TOP", 0, 5), ("A", "P1", 5, 9), ("A", "BASE", 9, 20),
                          ("B", "TOP", 0, 5), ("B", "P", 5, 9), ("B", "BASE", 9, 20),
                          ("C", "TOP", 0, 5), ("C", "BASE", 5, 20)],
                         columns=["well_id", "unit", "top_depth", "bottom_depth"])
    p = unit_presence(picks, wells, units, "P").set_index("well_id")["present"]
    assert (bool(p["A"]), bool(p["B"]), bool(p["C"])) == (True, True, False) and pd.isna(p["D"])
    p2 = unit_presence(picks, wells, units, "P2").set_index("well_id")
    assert not p2.loc["A", "present"]
    assert pd.isna(p2.loc["B", "present"]) and "parent unit P" in p2.loc["B", "reason"]
    with pytest.raises(ValueError, match="tolerance"):
        unit_presence(picks, wells, units, "P", tolerance=-1)


def test_extent_polygon_between_present_and_absent_wells():
    """The extent holds the east wells, not the west ones, and its edge runs halfway between them.

    Independent check: at 4000 random points, membership of the polygon equals the nearest-neighbour
    classification computed with scipy's cKDTree (reference library).
    """
    wells, picks = _tables()
    domain = shapely.box(X0, Y0, X0 + 4000, Y0 + 3000)
    ext = unit_extent(picks, wells, UNITS, "PER", clip=domain)
    assert ext.geom_type == "Polygon" and ext.is_valid
    for wid, x, y, east in _grid_wells():
        assert ext.contains(shapely.Point(x, y)) is east, wid
    assert ext.bounds == pytest.approx((MID, Y0, X0 + 4000, Y0 + 3000))
    assert ext.area == pytest.approx(2000 * 3000)
    grid = [(x, y, east) for _, x, y, east in _grid_wells()]
    xy = np.array([(x, y) for x, y, _ in grid])
    east = np.array([e for _, _, e in grid])
    rng = np.random.default_rng(3)
    pts = np.column_stack([rng.uniform(X0, X0 + 4000, 4000), rng.uniform(Y0, Y0 + 3000, 4000)])
    nearest = east[cKDTree(xy).query(pts)[1]]
    assert (shapely.contains_xy(ext, pts[:, 0], pts[:, 1]) == nearest).all()
    assert (inside_extent(unit_presence(picks, wells, UNITS, "PER"), pts) == nearest).all()


def test_extent_irregular_and_degenerate():
    """Scattered wells: the polygon agrees with the nearest-neighbour rule (scipy cKDTree, reference library)."""
    rng = np.random.default_rng(7)
    xy = rng.uniform(0, 1000, (60, 2))
    flag = (xy[:, 0] - 500) ** 2 + (xy[:, 1] - 500) ** 2 < 300 ** 2
    pres = pd.DataFrame({"well_id": [f"W{i}" for i in range(60)], "x": xy[:, 0], "y": xy[:, 1],
                         "present": pd.array(flag, dtype="boolean"), "reason": ""})
    ext = presence_extent(pres, clip=shapely.box(0, 0, 1000, 1000))
    pts = rng.uniform(0, 1000, (5000, 2))
    nearest = flag[cKDTree(xy).query(pts)[1]]
    assert (shapely.contains_xy(ext, pts[:, 0], pts[:, 1]) == nearest).all()
    # two wells: the perpendicular bisector splits them
    two = pres.iloc[:2].assign(x=[0.0, 100.0], y=[0.0, 0.0], present=pd.array([True, False], dtype="boolean"))
    ext2 = presence_extent(two, clip=shapely.box(-50, -50, 150, 50))
    assert ext2.bounds == pytest.approx((-50, -50, 50, 50))
    # no well without the unit: everywhere (None); no well with it: empty
    assert presence_extent(two.assign(present=pd.array([True, pd.NA], dtype="boolean"))) is None
    assert presence_extent(two.assign(present=pd.array([False, pd.NA], dtype="boolean"))).is_empty
    assert not inside_extent(two.assign(present=pd.array([False, False], dtype="boolean")), [[0, 0]]).any()


# -- through the store and the command line -----------------------------------------------


@pytest.fixture
def partial_store(empty_store, tmp_path, runner):
    import geopandas as gpd

    wells, picks = _tables()
    zones = [["well_id", "zone_id", "top_depth", "bottom_depth"]]
    heads = [["well_id", "zone_id", "measured_at", "head"]]
    ktests = [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]]
    for wid, x, y, east in _grid_wells():
        zones.append([wid, "D", 100, 110])
        heads.append([wid, "D", "2024-04-01", f"{420 - 0.002 * (x - X0):.4f}"])
        ktests.append([wid, "D", "2024-04-01", "slug", 5.0, "m/d"])
        if east:
            zones.append([wid, "P", 20, 30])
            heads.append([wid, "P", "2024-04-01", f"{480 + 0.001 * (x - X0) + 0.0005 * (y - Y0):.4f}"])
            ktests.append([wid, "P", "2024-04-01", "slug", 2.0, "m/d"])
        if wid in ("W20", "W31"):  # heads in the shale: the default lower unit of dhead must not be SH
            zones.append([wid, "S", 42, 48])
            heads.append([wid, "S", "2024-04-01", "450.0"])
            ktests.append([wid, "S", "2024-04-01", "packer", 1e-9, "m/s"])
    files = {"units": [list(UNITS.columns)] + UNITS.fillna("").values.tolist(),
             "wells": [list(wells.columns)] + wells.values.tolist(),
             "picks": [list(picks.columns)] + picks.values.tolist(),
             "zones": zones, "heads": heads, "ktests": ktests}
    for kind, rows in files.items():
        res = cli(runner, "import", empty_store, kind, write_csv(tmp_path / f"{kind}.csv", rows))
        assert res.exit_code == 0, res.output
    area = gpd.GeoDataFrame({"area_id": ["DOM"], "kind": ["domain"]},
                            geometry=[shapely.box(X0, Y0, X0 + 4000, Y0 + 3000)], crs=CRS)
    area.to_file(tmp_path / "domain.gpkg", driver="GPKG")
    res = cli(runner, "import", empty_store, "areas", tmp_path / "domain.gpkg")
    assert res.exit_code == 0, res.output
    return empty_store


def test_surface_of_partial_unit_is_nodata_outside_its_extent(partial_store, tmp_path, runner):
    """West of the halfway line every cell is no-data, east of it every cell has a value (GeoTIFF reopened)."""
    out = tmp_path / "out"
    res = cli(runner, "surface", partial_store, "--unit", "PER", "--quantity", "head", "--method", "idw",
              "--cell", 200, "--out", out)
    assert res.exit_code == 0, res.output
    with rasterio.open(out / "PER_head.tif") as r:
        band = r.read(1, masked=True)
        xs = r.transform.c + (np.arange(r.width) + 0.5) * r.transform.a
        assert r.nodata == -9999.0 and band.shape == (15, 20)
    west = xs < MID
    assert band.mask[:, west].all() and not band.mask[:, ~west].any()
    # IDW is exact at a data well: the cell centred on W20 holds its head
    col = int(np.argmin(np.abs(xs - (X0 + 2500))))
    assert float(band[12, col]) == pytest.approx(480 + 0.001 * 2500 + 0.0005 * 500, abs=1e-3)
    side = json.loads((out / "PER_head.json").read_text())
    ext = side["extent"]
    assert ext["applied"] is True and ext["cells_removed"] == int(west.sum()) * 15 == 150
    assert ext["units"]["PER"] == {"wells_present": 6, "wells_absent": 6, "wells_unknown": 2, "limited": True}
    assert ext["data_outside"] == []
    # the gradient raster inherits the mask
    with rasterio.open(out / "PER_gradient.tif") as r:
        assert r.read(1, masked=True).mask[:, west].all()
    # a unit present everywhere is not masked, and says so
    res = cli(runner, "surface", partial_store, "--unit", "DEEP", "--quantity", "head", "--method", "idw",
              "--cell", 200, "--out", out)
    assert res.exit_code == 0, res.output
    deep = json.loads((out / "DEEP_head.json").read_text())["extent"]
    assert deep["applied"] is False and deep["cells_removed"] == 0 and "everywhere" in deep["reason"]


def test_surface_without_extent_fills_the_west(partial_store, tmp_path):
    """The same surface with use_extent=False covers the west too: the mask above comes from the extent."""
    from hydroatlas import open_store, workflows

    with open_store(partial_store) as s:
        side = workflows.build_surface(s, "PER", "head", method="idw", cell=200, out=tmp_path / "o",
                                       use_extent=False)
    assert side["extent"]["applied"] is False
    with rasterio.open(side["files"]["raster"]) as r:
        assert not r.read(1, masked=True).mask.any()


def test_dhead_default_lower_unit_skips_the_aquitard(partial_store, tmp_path, runner):
    """dhead of PER subtracts DEEP (next aquifer), not SH (the aquitard right below, which has heads)."""
    out = tmp_path / "out"
    res = cli(runner, "surface", partial_store, "--unit", "PER", "--quantity", "dhead", "--method", "idw",
              "--cell", 200, "--out", out)
    assert res.exit_code == 0, res.output
    side = json.loads((out / "PER_dhead.json").read_text())
    assert side["lower_unit"] == "DEEP" and "across SH" in side["lower_unit_rule"]
    assert side["n_points"] == 6 and side["extent"]["applied"] is True
    with rasterio.open(out / "PER_dhead.tif") as r:
        band = r.read(1, masked=True)
        xs = r.transform.c + (np.arange(r.width) + 0.5) * r.transform.a
    col = int(np.argmin(np.abs(xs - (X0 + 2500))))
    expect = (480 + 0.001 * 2500 + 0.0005 * 500) - (420 - 0.002 * 2500)  # W20: PER head minus DEEP head
    assert float(band[12, col]) == pytest.approx(expect, abs=1e-3)
    assert band.mask[:, xs < MID].all()
    # asked for explicitly, the aquitard is still allowed
    res = cli(runner, "surface", partial_store, "--unit", "PER", "--quantity", "dhead", "--method", "idw",
              "--lower-unit", "SH", "--cell", 200, "--out", out)
    assert res.exit_code == 0, res.output
    assert json.loads((out / "PER_dhead.json").read_text())["lower_unit"] == "SH"
    assert "next aquifer below" in cli(runner, "surface", "--help").output.replace("\n", " ")


def test_map_default_unit_and_extent_outline(partial_store, tmp_path, runner):
    """Without --unit the map shows DEEP (12 zones with heads), not PER (6, on top); PER's map draws its extent."""
    from hydroatlas import open_store
    from hydroatlas.workflows.outputs import default_map_unit, unit_extent_outline

    with open_store(partial_store) as s:
        assert default_map_unit(s) == "DEEP"
        outline = unit_extent_outline(s, "PER")
        assert unit_extent_outline(s, "DEEP") is None
    assert outline.geometry.iloc[0].bounds == pytest.approx((MID, Y0, X0 + 4000, Y0 + 3000))
    res = cli(runner, "map", partial_store, "--out", tmp_path / "map.html")
    assert res.exit_code == 0, res.output
    page = (tmp_path / "map.html").read_text()
    stem = str(partial_store).rsplit("/", 1)[-1].rsplit(".", 1)[0]
    assert f"<div class='ha-title'>{stem} - DEEP" in page and "Extent of" not in page
    res = cli(runner, "map", partial_store, "--unit", "PER", "--out", tmp_path / "per.html")
    assert res.exit_code == 0, res.output
    page = (tmp_path / "per.html").read_text()
    assert "Extent of PER (from the picks)" in page


def test_model_grid_pinches_the_unit_outside_its_extent(partial_store, tmp_path, runner):
    """Every grid cell west of the halfway line is pinched in the PER layer, none east of it."""
    import xarray as xr

    out = tmp_path / "model"
    res = cli(runner, "surface", partial_store, "--unit", "DEEP", "--quantity", "head", "--method", "idw",
              "--cell", 200, "--out", out)
    assert res.exit_code == 0, res.output
    res = cli(runner, "grid", partial_store, "--cell", 250, "--layers", "PER,SH,DEEP", "--min-thickness", 1,
              "--out", out / "model.nc")
    assert res.exit_code == 0, res.output
    ds = xr.open_dataset(out / "model.nc")
    idomain = ds["idomain"].values
    west = ds["x"].values < MID
    assert idomain.shape == (3, 12, 16)
    assert (idomain[0][:, west] == -1).all() and (idomain[0][:, ~west] == 1).all()
    assert (idomain[1] == 1).all() and (idomain[2] == 1).all()
    thick0 = ds["top"].values - ds["botm"].values[0]
    assert np.allclose(thick0[:, west], 0.0)
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["grid"]["cells_outside_unit_extent"]["PER"] == int(west.sum()) * 12
    ds.close()
