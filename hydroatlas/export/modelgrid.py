"""Model-grid writers: one NetCDF file following the CF conventions (1.8), and plain arrays with a manifest."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from .names import atomic_path, ensure_folder, output_path, write_text

CF_VERSION = "CF-1.8"

#: variable -> (long name, unit template; {L} is the length unit)
VARIABLES = {
    "top": ("elevation of the top of the model layer", "{L}"),
    "bottom": ("elevation of the bottom of the model layer", "{L}"),
    "thickness": ("thickness of the model layer", "{L}"),
    "kh": ("horizontal hydraulic conductivity", "{L}/d"),
    "kv": ("vertical hydraulic conductivity", "{L}/d"),
    "start_head": ("starting hydraulic head", "{L}"),
    "pinched": ("1 where the unit pinches out (thickness raised to the minimum)", "1"),
    "head_borrowed": ("1 where the starting head comes from another layer", "1"),
}


def write_model_grid(path, *, arrays: dict, active, x, y, layer_units: list[str], crs_wkt: str, length_unit: str,
                     grid_info: dict, history: str, source: str, caution: str) -> dict:
    """Write the NetCDF file, the arrays folder beside it and manifest.json; return the paths.

    Parameters
    ----------
    arrays : dict
        Variable name -> array (nlay, nrow, ncol) (see :data:`VARIABLES`).
    active : array (nrow, ncol) of bool
    x, y : arrays (nrow, ncol)
        Cell-centre coordinates in the CRS (rotated grids have 2-D coordinates).
    grid_info : dict
        origin (lower-left corner), cell size, rotation (degrees counter-clockwise), shape.
    """
    import xarray as xr

    path = Path(path)
    nlay, nrow, ncol = next(iter(arrays.values())).shape
    L = length_unit
    rotated = abs(grid_info.get("rotation", 0.0)) > 0
    data_vars = {}
    for name, arr in arrays.items():
        long_name, unit = VARIABLES[name]
        attrs = {"long_name": long_name, "units": unit.format(L=L), "grid_mapping": "crs"}
        if rotated:
            attrs["coordinates"] = "x y"
        data_vars[name] = (("layer", "row", "col"), np.asarray(arr), attrs)
    data_vars["active"] = (("row", "col"), np.asarray(active, dtype="int8"),
                           {"long_name": "1 for active cells (inside the model domain)", "units": "1",
                            "grid_mapping": "crs", "flag_values": np.array([0, 1], dtype="int8"),
                            "flag_meanings": "inactive active"})
    data_vars["crs"] = ((), np.int32(0), {"crs_wkt": crs_wkt, "spatial_ref": crs_wkt})
    data_vars["unit_code"] = (("layer",), np.array(layer_units, dtype=object),
                              {"long_name": "hydrostratigraphic unit of the model layer"})
    coords = {"layer": ("layer", np.arange(1, nlay + 1, dtype="int32"),
                        {"long_name": "model layer, 1 = top", "units": "1"})}
    if rotated:
        coords["x"] = (("row", "col"), x, {"long_name": "x of cell centre", "units": _crs_unit(crs_wkt),
                                           "standard_name": "projection_x_coordinate"})
        coords["y"] = (("row", "col"), y, {"long_name": "y of cell centre", "units": _crs_unit(crs_wkt),
                                           "standard_name": "projection_y_coordinate"})
        ds = xr.Dataset(data_vars, coords=coords)
    else:
        # 1-D coordinate variables (CF): the dimensions are named after them
        ds = xr.Dataset({k: (tuple({"row": "y", "col": "x"}.get(d, d) for d in v[0]), v[1], v[2])
                         for k, v in data_vars.items()},
                        coords={**coords,
                                "x": ("x", x[0, :], {"standard_name": "projection_x_coordinate",
                                                     "long_name": "x of cell centre", "units": _crs_unit(crs_wkt),
                                                     "axis": "X"}),
                                "y": ("y", y[:, 0], {"standard_name": "projection_y_coordinate",
                                                     "long_name": "y of cell centre", "units": _crs_unit(crs_wkt),
                                                     "axis": "Y"})})
    ds.attrs.update({"Conventions": CF_VERSION, "title": "hydroatlas model grid", "history": history,
                     "source": source, "comment": caution,
                     "hydroatlas_grid": json.dumps(grid_info), "k_note": f"K in {L}/d, as models commonly use"})
    encoding = {name: {"zlib": True, "complevel": 4} for name in arrays}
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="netcdf4", encoding=encoding)
    folder = ensure_folder(path.with_name(path.stem + "_arrays"))
    files = {}
    for name, arr in list(arrays.items()) + [("active", np.asarray(active, dtype="int8")[None])]:
        files[name] = []
        for k in range(arr.shape[0]):
            stem = f"{name}_layer{k + 1}" if name != "active" else "active"
            with atomic_path(output_path(folder, f"{stem}.npy")) as tmp:
                np.save(tmp, arr[k])
            with atomic_path(output_path(folder, f"{stem}.txt")) as tmp:
                np.savetxt(tmp, arr[k], fmt="%d" if arr.dtype.kind in "iub" else "%.6g")
            files[name].append({"npy": f"{folder.name}/{stem}.npy", "txt": f"{folder.name}/{stem}.txt"})
    manifest = {
        "netcdf": path.name, "conventions": CF_VERSION, "shape": {"layers": nlay, "rows": nrow, "cols": ncol},
        "layers": [{"layer": i + 1, "unit": u} for i, u in enumerate(layer_units)],
        "grid": grid_info, "crs_wkt": crs_wkt, "length_unit": L,
        "units": {name: VARIABLES[name][1].format(L=L) for name in arrays} | {"active": "1"},
        "k_note": f"K is in {L}/d (length per day), as groundwater models commonly use",
        "row_order": "row 1 is the row at the far side from the origin along the grid's y axis (north edge when "
                     "the rotation is 0); column 1 is next to the origin",
        "text_format": "whitespace-separated, one grid row per line", "files": files, "history": history,
        "caution": caution}
    manifest_path = write_text(path.parent / "manifest.json", json.dumps(manifest, indent=2))
    return {"netcdf": str(path), "arrays": str(folder), "manifest": str(manifest_path)}


def _crs_unit(crs_wkt: str) -> str:
    from pyproj import CRS

    crs = CRS.from_wkt(crs_wkt)
    unit = crs.axis_info[0].unit_name if crs.axis_info else "m"
    return {"metre": "m", "meter": "m", "foot": "ft", "US survey foot": "US_survey_foot"}.get(unit, unit)
