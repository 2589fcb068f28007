"""Model-grid writers: one NetCDF file following the CF conventions (1.8), and plain arrays with a manifest.

Both take a :class:`hydroatlas.layering.ModelLayers` (any object with its fields will do: the writers read
attributes only) and write the arrays under the names MODFLOW 6 gives them: ``top`` (nrow, ncol), ``botm``,
``idomain``, ``k``, ``k33``, ``strt`` (nlay, nrow, ncol) and ``icelltype`` (nlay), and ``strt_source`` when the
layers carry it. Rows run as in MODFLOW: row 1 is the row farthest from the origin along the grid's y axis (the
north edge when the rotation is 0).

The NetCDF file is checked in the tests with the CF checker (``cfchecks``), GDAL's netCDF driver and
rioxarray:

- the grid mapping variable ``crs`` holds pyproj's ``CRS.to_cf()`` (``grid_mapping_name``, the projection
  parameters and ``crs_wkt``), plus ``spatial_ref`` (the WKT again) and ``GeoTransform`` (six numbers, GDAL's
  affine transform of the grid, rotation included), which GDAL and rioxarray read;
- an unrotated grid has 1-D coordinate variables ``x`` and ``y`` (standard names ``projection_x_coordinate``
  and ``projection_y_coordinate``, cell centres); a rotated grid has dimensions ``row`` and ``col`` and 2-D
  auxiliary coordinates ``x``, ``y`` (projection coordinates of the cell centres) and ``lon``, ``lat``;
- every numeric variable has a ``units`` attribute that UDUNITS-2 accepts (``m``, ``ft``, ``m day-1``,
  ``ft day-1``, ``1``; the layer numbers ``count``); the unit codes and roles of the layers are character arrays;
  there is no time dimension (the grid is one steady state).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from ..errors import ParameterError
from .names import atomic_path, ensure_folder, output_path, write_text

CF_VERSION = "CF-1.8"

#: model length units the writers accept -> UDUNITS-2 spelling and MODFLOW 6 LENGTH_UNITS
LENGTH_UNITS = {"m": ("m", "meters"), "ft": ("ft", "feet")}

#: array name -> (long name, kind of unit: 'length', 'k' or '1'), in the order they are written
VARIABLES = {
    "top": ("elevation of the top of model layer 1", "length"),
    "botm": ("elevation of the bottom of the model layer", "length"),
    "idomain": ("cell status: 1 active, 0 inactive, -1 vertical pass-through (MODFLOW 6 IDOMAIN)", "1"),
    "k": ("horizontal hydraulic conductivity", "k"),
    "k33": ("vertical hydraulic conductivity", "k"),
    "strt": ("starting hydraulic head", "length"),
    "icelltype": ("0 confined (saturated thickness held constant), 1 convertible (MODFLOW 6 ICELLTYPE)", "1"),
}

#: where a starting head comes from (ModelLayers.strt_source, optional) -> flag meaning in the NetCDF file
STRT_SOURCE_FLAGS = {0: "own_head_surface", 1: "between_layers_above_and_below", 2: "nearest_layer_one_side",
                     3: "layer_mean"}
STRT_SOURCE_LONG_NAME = ("where the starting head comes from: 0 the unit's own head surface, 1 linear in elevation "
                         "between the layers with heads above and below, 2 the nearest layer with heads on one "
                         "side, 3 the layer's mean")

#: flag variables: value -> flag meaning (CF flag_values / flag_meanings)
FLAGS = {"idomain": {-1: "vertical_pass_through", 0: "inactive", 1: "active"},
         "icelltype": {0: "confined", 1: "convertible"},
         "strt_source": STRT_SOURCE_FLAGS}
_LONG_NAMES = {name: long for name, (long, _) in VARIABLES.items()} | {"strt_source": STRT_SOURCE_LONG_NAME}

IDOMAIN_MEANINGS = {1: "active", 0: "inactive", -1: "vertical pass-through (MODFLOW 6 convention: the cell "
                                                       "is removed and the cells above and below connect)"}
ICELLTYPE_MEANINGS = {0: "confined: saturated thickness held constant",
                      1: "convertible: saturated thickness follows the head (the layer may hold the water table)"}

#: CRS axis unit (pyproj's unit_name) -> UDUNITS-2 spelling
_CRS_UDUNITS = {"metre": "m", "meter": "m", "foot": "ft", "us survey foot": "US_survey_foot",
                "foot_survey_us": "US_survey_foot", "kilometre": "km"}


def udunits_length(unit: str) -> str:
    """The UDUNITS-2 spelling of a model length unit: 'm' -> 'm', 'ft' -> 'ft'."""
    try:
        return LENGTH_UNITS[unit][0]
    except KeyError:
        raise ParameterError(f"model length unit must be one of {', '.join(LENGTH_UNITS)}; got {unit!r}") from None


def udunits_k(k_unit: str) -> str:
    """The UDUNITS-2 spelling of a conductivity unit per day: 'm/d' -> 'm day-1', 'ft/d' -> 'ft day-1'."""
    length, _, per = str(k_unit).partition("/")
    if per not in ("d", "day") or length not in LENGTH_UNITS:
        raise ParameterError(f"model K unit must be m/d or ft/d; got {k_unit!r}")
    return f"{udunits_length(length)} day-1"


def crs_udunits(crs) -> str:
    """UDUNITS-2 spelling of the unit of a projected CRS's x axis (a factor of metres when it has no name)."""
    info = crs.axis_info[0] if crs.axis_info else None
    if info is None:
        return "m"
    name = str(info.unit_name or "").strip().lower()
    if name in _CRS_UDUNITS:
        return _CRS_UDUNITS[name]
    return f"{float(info.unit_conversion_factor)!r} m"


def geotransform(layers) -> tuple[float, ...]:
    """GDAL's affine transform of the grid: (X, dX/dcol, dX/drow, Y, dY/dcol, dY/drow) of cell corners.

    The first corner is the outer corner of row 1, column 1 (the top-left corner when the rotation is 0); the
    rotation turns the grid counter-clockwise about the lower-left corner ``(x0, y0)``.
    """
    t = math.radians(float(layers.rotation))
    c, s = math.cos(t), math.sin(t)
    cell, nrow = float(layers.cell), int(layers.nrow)
    gt = (float(layers.x0) - nrow * cell * s, cell * c, cell * s,
          float(layers.y0) + nrow * cell * c, cell * s, -cell * c)
    return tuple(0.0 if abs(v) < 1e-12 * max(1.0, cell) else v for v in gt)


def cell_centres(layers) -> tuple[np.ndarray, np.ndarray]:
    """x, y (nrow, ncol) of the cell centres in the CRS; row 1 (index 0) is the far side from the origin."""
    from ..layering import grid_cell_centres

    return grid_cell_centres(float(layers.x0), float(layers.y0), float(layers.cell), int(layers.nrow),
                             int(layers.ncol), float(layers.rotation))


def check_layers(layers) -> dict:
    """The arrays of ``layers`` as numpy arrays, after checking shapes, units and values.

    Raises
    ------
    ParameterError
        An array of the wrong shape, an idomain value other than -1, 0, 1, an icelltype other than 0 or 1, a
        length unit other than m or ft, a cell size that is not positive, or a missing value in an active cell.
    """
    nlay, nrow, ncol = len(layers.units), int(layers.nrow), int(layers.ncol)
    if nlay < 1 or nrow < 1 or ncol < 1:
        raise ParameterError(f"a model grid needs at least one layer, row and column; got {nlay} x {nrow} x {ncol}")
    if not (np.isfinite(layers.cell) and layers.cell > 0):
        raise ParameterError(f"the cell size must be > 0; got {layers.cell}")
    udunits_length(layers.length_unit)
    udunits_k(layers.k_unit)
    if layers.time_unit != "days":
        raise ParameterError(f"model time unit must be days; got {layers.time_unit!r}")
    if len(layers.roles) != nlay:
        raise ParameterError(f"{len(layers.roles)} roles for {nlay} layers")
    shapes = {"top": (nrow, ncol), "icelltype": (nlay,)}
    arrays = {}
    for name in VARIABLES:
        arr = np.asarray(getattr(layers, name))
        want = shapes.get(name, (nlay, nrow, ncol))
        if arr.shape != want:
            raise ParameterError(f"model array {name} has shape {arr.shape}; expected {want}")
        arrays[name] = arr
    for name, allowed in (("idomain", (-1, 0, 1)), ("icelltype", (0, 1))):
        arr = arrays[name]
        if not np.all(np.isin(arr, allowed)):
            raise ParameterError(f"model array {name} holds values other than {', '.join(map(str, allowed))}: "
                                 f"{sorted(set(np.unique(arr).tolist()) - set(allowed))}")
        arrays[name] = arr.astype("int32")
    live = arrays["idomain"] > 0
    for name in ("botm", "k", "k33", "strt"):
        arrays[name] = arrays[name].astype("float64")
        if not np.isfinite(arrays[name][live]).all():
            raise ParameterError(f"model array {name} has a missing or infinite value in an active cell")
    arrays["top"] = arrays["top"].astype("float64")
    if not np.isfinite(arrays["top"][live.any(axis=0)]).all():
        raise ParameterError("model array top has a missing or infinite value above an active cell")
    for name in ("k", "k33"):
        if not (arrays[name][live] > 0).all():
            raise ParameterError(f"model array {name} must be > 0 in every active cell")
    source = getattr(layers, "strt_source", None)
    if source is not None:
        source = np.asarray(source)
        if source.shape != (nlay, nrow, ncol) or not np.isin(source, list(STRT_SOURCE_FLAGS)).all():
            raise ParameterError(f"model array strt_source must have shape {(nlay, nrow, ncol)} and values "
                                 f"{', '.join(map(str, STRT_SOURCE_FLAGS))}")
        arrays["strt_source"] = source.astype("int32")
    return arrays


def _units_of(layers) -> dict:
    kinds = {"length": udunits_length(layers.length_unit), "k": udunits_k(layers.k_unit), "1": "1"}
    return {name: kinds[kind] for name, (_, kind) in VARIABLES.items()} | {"strt_source": "1"}


def _written(arrays: dict) -> list[str]:
    """The arrays written, in order: :data:`VARIABLES`, then ``strt_source`` when the layers have it."""
    return [name for name in (*VARIABLES, "strt_source") if name in arrays]


def _plain(value):
    """``value`` made JSON-safe (tuples to lists, numpy numbers to Python numbers, other objects to text)."""
    return json.loads(json.dumps(value, default=lambda o: o.item() if hasattr(o, "item") else str(o)))


def _char_array(ds, name: str, texts: list[str], dim: str, long_name: str):
    width = max(1, max(len(t.encode("utf-8")) for t in texts))
    ds.createDimension(f"{name}_strlen", width)
    var = ds.createVariable(name, "S1", (dim, f"{name}_strlen"))
    raw = np.zeros((len(texts), width), dtype="S1")
    for i, t in enumerate(texts):
        b = t.encode("utf-8")
        raw[i, : len(b)] = np.frombuffer(b, dtype="S1")
    var[:] = raw
    var.long_name = long_name
    return var


def write_netcdf(path, layers, *, history: str, source: str, caution: str, arrays: dict | None = None) -> Path:
    """Write the CF-1.8 NetCDF file of ``layers`` (see the module docstring); return its path."""
    import netCDF4
    from pyproj import Transformer

    path = Path(path)
    arrays = check_layers(layers) if arrays is None else arrays
    units = _units_of(layers)
    nlay, nrow, ncol = len(layers.units), int(layers.nrow), int(layers.ncol)
    rotated = float(layers.rotation) % 360.0 != 0.0
    crs = layers.crs
    xy_units = crs_udunits(crs)
    xc, yc = cell_centres(layers)
    gt = geotransform(layers)
    with atomic_path(path) as tmp:
        ds = netCDF4.Dataset(tmp, "w", format="NETCDF4")
        try:
            ds.setncatts({"Conventions": CF_VERSION, "title": "hydroatlas model grid", "history": history,
                          "source": source, "comment": caution,
                          "model_length_unit": layers.length_unit, "model_time_unit": layers.time_unit,
                          "model_k_unit": layers.k_unit,
                          "hydroatlas_grid": json.dumps(_plain(_grid_info(layers))),
                          "hydroatlas_merged": json.dumps(_plain(layers.merged)),
                          "hydroatlas_notes": json.dumps(_plain(layers.notes))})
            ds.createDimension("layer", nlay)
            hdims = ("row", "col") if rotated else ("y", "x")
            ds.createDimension(hdims[0], nrow)
            ds.createDimension(hdims[1], ncol)
            # layer numbers, 1 at the top; units "count" (UDUNITS-2's dimensionless count): the CF checker warns
            # on a coordinate without units, and rioxarray fails on the units "1" of a band coordinate (it reads
            # the text as a number); without a layer variable GDAL takes another 1-D variable's values
            lay = ds.createVariable("layer", "i4", ("layer",))
            lay[:] = np.arange(1, nlay + 1)
            lay.setncatts({"long_name": "model layer number, 1 at the top", "units": "count"})
            if rotated:
                extra = _rotated_coordinates(ds, layers, xc, yc, xy_units, Transformer)
            else:
                for name, values, axis in (("x", xc[0, :], "X"), ("y", yc[:, 0], "Y")):
                    v = ds.createVariable(name, "f8", (name,))
                    v[:] = values
                    v.setncatts({"standard_name": f"projection_{name}_coordinate", "axis": axis,
                                 "long_name": f"{name} of the cell centre", "units": xy_units})
                extra = None
            gm = ds.createVariable("crs", "i4", ())
            gm.setncatts({**crs.to_cf(), "spatial_ref": crs.to_wkt(),
                          "GeoTransform": " ".join(repr(float(v)) for v in gt)})
            for name in _written(arrays):
                arr = arrays[name]
                dims = {1: ("layer",), 2: hdims, 3: ("layer", *hdims)}[arr.ndim]
                if arr.dtype.kind == "f":
                    var = ds.createVariable(name, "f8", dims, zlib=True, complevel=4,
                                            fill_value=netCDF4.default_fillvals["f8"])
                    var[:] = np.ma.masked_invalid(arr)
                else:
                    var = ds.createVariable(name, "i4", dims, zlib=arr.ndim > 1)
                    var[:] = arr
                var.long_name = _LONG_NAMES[name]
                var.units = units[name]
                if name in FLAGS:
                    values = sorted(FLAGS[name])
                    var.setncatts({"flag_values": np.array(values, "i4"),
                                   "flag_meanings": " ".join(FLAGS[name][v] for v in values)})
                if arr.ndim > 1:
                    var.grid_mapping = "crs"
                    if extra:
                        var.coordinates = extra
            _char_array(ds, "unit_code", [str(u) for u in layers.units], "layer",
                        "hydrostratigraphic unit of the model layer")
            _char_array(ds, "unit_role", [str(r) for r in layers.roles], "layer",
                        "role of the unit: aquifer, aquitard, confining or other")
        finally:
            ds.close()
    return path


def _rotated_coordinates(ds, layers, xc, yc, xy_units, Transformer) -> str:
    """2-D auxiliary coordinates of a rotated grid: projection x, y and longitude, latitude of cell centres."""
    for name, values in (("x", xc), ("y", yc)):
        v = ds.createVariable(name, "f8", ("row", "col"), zlib=True)
        v[:] = values
        v.setncatts({"standard_name": f"projection_{name}_coordinate", "units": xy_units,
                     "long_name": f"{name} of the cell centre (the grid is rotated by {float(layers.rotation):g} "
                                  "degrees counter-clockwise)"})
    geodetic = layers.crs.geodetic_crs
    lon, lat = Transformer.from_crs(layers.crs, geodetic, always_xy=True).transform(xc, yc)
    for name, values, std, unit in (("lon", lon, "longitude", "degrees_east"),
                                    ("lat", lat, "latitude", "degrees_north")):
        v = ds.createVariable(name, "f8", ("row", "col"), zlib=True)
        v[:] = values
        v.setncatts({"standard_name": std, "units": unit,
                     "long_name": f"{std} of the cell centre ({geodetic.name})"})
    return "lat lon y x"


def _grid_info(layers) -> dict:
    return {"origin": [float(layers.x0), float(layers.y0)], "origin_is": "lower-left corner",
            "cell": float(layers.cell), "rows": int(layers.nrow), "cols": int(layers.ncol),
            "rotation": float(layers.rotation), "rotation_is": "degrees counter-clockwise about the origin",
            "geotransform": list(geotransform(layers)),
            "geotransform_is": "GDAL affine transform (X, dX/dcol, dX/drow, Y, dY/dcol, dY/drow) of cell corners, "
                               "starting at the outer corner of row 1, column 1",
            "xy_unit": crs_udunits(layers.crs)}


def write_arrays(folder, layers, arrays: dict | None = None) -> dict:
    """One ``.npy`` and one whitespace-separated ``.txt`` file per array and layer; return the file names.

    3-D arrays give ``<name>_layer<N>.npy/.txt`` (one grid row per text line, row 1 first, as MODFLOW 6 reads
    a layered array with OPEN/CLOSE), ``top`` gives ``top.npy/.txt`` and ``icelltype`` gives
    ``icelltype.npy/.txt`` (one value per layer). Missing values (inactive cells only) are NaN.
    """
    folder = ensure_folder(folder)
    arrays = check_layers(layers) if arrays is None else arrays
    files = {}

    def save(stem, arr):
        with atomic_path(output_path(folder, f"{stem}.npy")) as tmp:
            np.save(tmp, arr)
        with atomic_path(output_path(folder, f"{stem}.txt")) as tmp:
            np.savetxt(tmp, np.atleast_2d(arr) if arr.ndim == 2 else arr[None],
                       fmt="%d" if arr.dtype.kind in "iub" else "%.10g")
        return {"npy": f"{folder.name}/{stem}.npy", "txt": f"{folder.name}/{stem}.txt"}

    for name in _written(arrays):
        arr = arrays[name]
        if arr.ndim == 3:
            files[name] = [save(f"{name}_layer{k + 1}", arr[k]) for k in range(arr.shape[0])]
        else:
            files[name] = [save(name, arr)]
    return files


def write_model_grid(path, layers, *, history: str, source: str, caution: str,
                     manifest_extra: dict | None = None) -> dict:
    """Write the NetCDF file, the arrays folder beside it and manifest.json; return their paths.

    Parameters
    ----------
    path : path of the NetCDF file (``FILE.nc``); the arrays go to ``FILE_arrays/`` and the manifest to
        ``manifest.json`` in the same folder.
    layers : :class:`hydroatlas.layering.ModelLayers`
    history, source, caution : texts for the NetCDF global attributes ``history``, ``source`` and ``comment``
        and for the manifest.
    manifest_extra : dict, optional
        More manifest entries (its ``grid`` entry is merged into the manifest's ``grid``).
    """
    path = Path(path)
    arrays = check_layers(layers)
    write_netcdf(path, layers, history=history, source=source, caution=caution, arrays=arrays)
    folder = path.with_name(path.stem + "_arrays")
    files = write_arrays(folder, layers, arrays)
    units = _units_of(layers)
    nlay, nrow, ncol = len(layers.units), int(layers.nrow), int(layers.ncol)
    extra = dict(manifest_extra or {})
    grid = _grid_info(layers) | dict(extra.pop("grid", {}) or {})
    shown = {"length": layers.length_unit, "k": layers.k_unit}
    manifest = {
        "netcdf": path.name, "conventions": CF_VERSION, "shape": {"layers": nlay, "rows": nrow, "cols": ncol},
        "layers": [{"layer": i + 1, "unit": str(u), "role": str(r), "icelltype": int(arrays["icelltype"][i])}
                   for i, (u, r) in enumerate(zip(layers.units, layers.roles))],
        "grid": grid, "crs_wkt": layers.crs.to_wkt(),
        "length_unit": layers.length_unit, "time_unit": layers.time_unit, "k_unit": layers.k_unit,
        "units": {name: shown.get(VARIABLES.get(name, ("", "1"))[1], "1") for name in _written(arrays)},
        "netcdf_units": {name: units[name] for name in _written(arrays)},
        "idomain_values": {str(k): v for k, v in IDOMAIN_MEANINGS.items()},
        "icelltype_values": {str(k): v for k, v in ICELLTYPE_MEANINGS.items()},
        **({"strt_source_values": {str(k): v.replace("_", " ") for k, v in STRT_SOURCE_FLAGS.items()}}
           if "strt_source" in arrays else {}),
        "merged": _plain(layers.merged), "notes": _plain(layers.notes),
        "row_order": "row 1 is the row at the far side from the origin along the grid's y axis (north edge when "
                     "the rotation is 0); column 1 is next to the origin",
        "text_format": "whitespace-separated, one grid row per line; NaN only in inactive cells",
        "files": files, "history": history, "caution": caution}
    manifest.update(_plain(extra))
    manifest_path = write_text(output_path(path.parent, "manifest.json"), json.dumps(manifest, indent=2))
    return {"netcdf": str(path), "arrays": str(folder), "manifest": str(manifest_path)}
