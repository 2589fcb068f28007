"""A MODFLOW 6 simulation of a model grid, written with flopy (optional dependency group ``mf6``).

:func:`write_mf6` takes a :class:`hydroatlas.layering.ModelLayers` and writes one steady-state simulation:

- TDIS: one stress period of 1 day, 1 time step (time units days); there is no STO package, so MODFLOW 6
  solves the period as steady state;
- GWF model with DIS (layers, rows, columns, square cells, ``top``, ``botm``, ``idomain``, ``xorigin`` and
  ``yorigin`` at the lower-left corner, ``angrot`` the rotation, length units meters or feet), NPF
  (``icelltype``, ``k``, ``k33``), IC (``strt``);
- WEL: the wells pumping now (records without an end), one entry per pumped zone, in the layer that holds the
  zone's mid elevation, rate negative (extraction) in model length cubed per day;
- DRN: one drain per spring at the spring's elevation, conductance given by the caller (length squared per day;
  no default: hydroatlas has no basis to choose one);
- OC: heads and budgets saved at the end of the period;
- IMS: present with no settings, so MODFLOW 6 uses its own documented defaults; hydroatlas chooses no solver
  settings (a simulation without a solution file does not run).

MODFLOW 6 itself is not run by hydroatlas or its tests; flopy reads the simulation back and checks it.
"""

from __future__ import annotations

import json
import math
import os
import re
import secrets
import shutil
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import ParameterError
from ..quantities import convert
from .modelgrid import LENGTH_UNITS, check_layers
from .names import ensure_folder, output_path, write_text

#: characters kept in a MODFLOW 6 model name (at most 16, no blanks)
_NAME_UNSAFE = re.compile(r"[^A-Za-z0-9_.-]")
MAX_NAME = 16
_BOUNDNAME_UNSAFE = re.compile(r"[^A-Za-z0-9_.-]")
SUMMARY_FILE = "hydroatlas_mf6.json"

SOLVER_NOTE = ("The IMS file holds no settings: MODFLOW 6 uses its own defaults (see the MODFLOW 6 input "
               "description). hydroatlas chooses no solver settings; set them for your model.")
STEADY_NOTE = "One stress period of 1 day with 1 time step; no STO package, so MODFLOW 6 solves it as steady state."
NOT_RUN_NOTE = "hydroatlas does not run MODFLOW 6; flopy reads the simulation back in hydroatlas's tests."


def model_name(text) -> str:
    """A MODFLOW 6 model and simulation name from ``text``, e.g. the NetCDF file's stem.

    Letters, digits, ``_``, ``.`` and ``-`` are kept, any other character becomes ``_``, the result is cut to
    16 characters (MODFLOW 6's limit) and a leading ``.`` or ``-`` becomes ``_``; an empty name gives ``model``.

    >>> model_name("district model 2024")
    'district_model_2'
    """
    name = _NAME_UNSAFE.sub("_", str(text))[:MAX_NAME]
    if name[:1] in (".", "-"):
        name = "_" + name[1:]
    return name or "model"


def boundname(text) -> str:
    """A MODFLOW 6 boundary name for a well or spring id: other characters become ``_``, cut to 40."""
    return (_BOUNDNAME_UNSAFE.sub("_", str(text)) or "_")[:40]


def pumping_now(pumping: pd.DataFrame, zones: pd.DataFrame, wells: pd.DataFrame) -> pd.DataFrame:
    """The zones pumped now, with their rates and open intervals.

    A record is current when it has no end; of several current records of a zone (or of a whole well) the
    latest start counts, as in the drawdown scenarios. A whole-well record (``zone_id`` '') is shared among
    the well's zones in proportion to their open length (common practice (no source) when the inflow per zone
    is not measured); a well without zones keeps one row with no interval.

    Parameters
    ----------
    pumping, zones, wells : the store's ``pumping``, ``zones`` and ``wells`` tables.

    Returns
    -------
    DataFrame with columns well_id, zone_id, x, y, rate_m3d (>= 0, pumped out), top_elev, bottom_elev
    (elevations of the zone, NaN when the well has no zones).
    """
    cols = ["well_id", "zone_id", "x", "y", "rate_m3d", "top_elev", "bottom_elev"]
    if pumping is None or pumping.empty:
        return pd.DataFrame(columns=cols)
    rec = pumping.copy()
    rec["zone_id"] = rec["zone_id"].fillna("").astype(str)
    end = rec["end"]
    rec = rec[end.isna() | end.astype(str).str.strip().eq("")]
    rec = rec.sort_values("start").groupby(["well_id", "zone_id"]).tail(1).sort_values(["well_id", "zone_id"])
    w = wells.set_index("well_id")
    z = zones.merge(wells[["well_id", "ground_elev"]], on="well_id")
    z = z.assign(top_elev=z["ground_elev"] - z["top_depth"], bottom_elev=z["ground_elev"] - z["bottom_depth"],
                 length=z["bottom_depth"] - z["top_depth"])
    rows = []
    for r in rec.itertuples(index=False):
        if r.well_id not in w.index:
            continue
        x, y = float(w.at[r.well_id, "x"]), float(w.at[r.well_id, "y"])
        mine = z[z["well_id"] == r.well_id]
        if r.zone_id:
            mine = mine[mine["zone_id"] == r.zone_id]
        if mine.empty:
            rows.append((r.well_id, r.zone_id, x, y, float(r.rate_m3d), math.nan, math.nan))
            continue
        share = mine["length"].to_numpy(float) / mine["length"].sum()
        for zr, f in zip(mine.itertuples(index=False), share):
            rows.append((r.well_id, zr.zone_id, x, y, float(r.rate_m3d) * f, float(zr.top_elev),
                         float(zr.bottom_elev)))
    return pd.DataFrame(rows, columns=cols)


def cell_of(layers, x: float, y: float):
    """(row, col), 0-based, of the cell holding the point (x, y); None outside the grid."""
    t = math.radians(float(layers.rotation))
    dx, dy = float(x) - float(layers.x0), float(y) - float(layers.y0)
    u = dx * math.cos(t) + dy * math.sin(t)
    v = -dx * math.sin(t) + dy * math.cos(t)
    col, up = math.floor(u / layers.cell), math.floor(v / layers.cell)
    if not (0 <= col < layers.ncol and 0 <= up < layers.nrow):
        return None
    return int(layers.nrow - 1 - up), int(col)


def layer_at(arrays: dict, row: int, col: int, z: float):
    """(layer, note) for elevation ``z`` in the column (row, col), 0-based; layer None when it has no place.

    The layer whose bottom lies below ``z`` and whose top lies at or above it; above the model top, the first
    layer. When that cell is not active (idomain -1 or 0) the active cell of the column whose centre is
    nearest in elevation is taken, and the note says so.
    """
    idomain = arrays["idomain"][:, row, col]
    surfaces = np.concatenate([[arrays["top"][row, col]], arrays["botm"][:, row, col]])
    active = np.flatnonzero(idomain > 0)
    if not active.size:
        return None, "no active cell in its grid column"
    if not np.isfinite(z):
        return None, "no open interval (the well has no zones)"
    note = ""
    if z > surfaces[0]:
        k = 0
        note = "above the model top: placed in the first layer"
    else:
        below = np.flatnonzero(surfaces[1:] < z)
        if not below.size:
            return None, "below the bottom of the model"
        k = int(below[0])
    if idomain[k] <= 0:
        mids = 0.5 * (surfaces[:-1] + surfaces[1:])
        best = int(active[np.argmin(np.abs(mids[active] - z))])
        note = (f"layer {k + 1} is {'a vertical pass-through' if idomain[k] < 0 else 'an inactive'} cell there: "
                f"placed in layer {best + 1}, the nearest active cell in elevation")
        k = best
    return k, note


def place_wells(layers, arrays: dict, wells: pd.DataFrame) -> tuple[list, list]:
    """WEL entries for :func:`pumping_now` rows: (placed, left_out); rates in model length cubed per day."""
    placed, left = [], []
    rate_unit = f"{layers.length_unit}3/d"
    for r in wells.itertuples(index=False):
        where = {"well_id": str(r.well_id), "zone_id": str(r.zone_id)}
        cell = cell_of(layers, r.x, r.y)
        if cell is None:
            left.append(where | {"reason": "outside the grid"})
            continue
        mid = 0.5 * (float(r.top_elev) + float(r.bottom_elev))
        k, note = layer_at(arrays, *cell, mid)
        if k is None:
            left.append(where | {"reason": note})
            continue
        q = -float(convert(float(r.rate_m3d), "m3/d", rate_unit, "rate"))
        placed.append(where | {"layer": k + 1, "row": cell[0] + 1, "col": cell[1] + 1, "rate": q,
                               "rate_unit": rate_unit, "zone_mid_elev": mid, "boundname": boundname(r.well_id),
                               "note": note})
    return placed, left


def place_springs(layers, arrays: dict, springs: pd.DataFrame) -> tuple[list, list]:
    """DRN cells for springs (columns spring_id, x, y, elev): (placed, left_out)."""
    placed, left = [], []
    for r in springs.itertuples(index=False):
        where = {"spring_id": str(r.spring_id)}
        cell = cell_of(layers, r.x, r.y)
        if cell is None:
            left.append(where | {"reason": "outside the grid"})
            continue
        k, note = layer_at(arrays, *cell, float(r.elev))
        if k is None:
            left.append(where | {"reason": note})
            continue
        placed.append(where | {"layer": k + 1, "row": cell[0] + 1, "col": cell[1] + 1, "elev": float(r.elev),
                               "boundname": boundname(r.spring_id), "note": note})
    return placed, left


def _filled(arrays: dict) -> dict:
    """Arrays for MODFLOW: NaN (inactive cells only, see :func:`check_layers`) replaced by harmless numbers.

    top: the mean of the known tops; a bottom: the surface above (zero thickness); K: the layer's mean; a head:
    the cell's top. MODFLOW 6 reads but does not use them.
    """
    out = {k: np.array(v, copy=True) for k, v in arrays.items()}
    top = out["top"]
    top[~np.isfinite(top)] = np.nanmean(top) if np.isfinite(top).any() else 0.0
    above = top
    for k in range(out["botm"].shape[0]):
        b = out["botm"][k]
        b[~np.isfinite(b)] = above[~np.isfinite(b)]
        b[:] = np.minimum(b, above)
        for name in ("k", "k33"):
            a = out[name][k]
            a[~np.isfinite(a)] = np.nanmean(a) if np.isfinite(a).any() else 1.0
        s = out["strt"][k]
        s[~np.isfinite(s)] = above[~np.isfinite(s)]
        above = b
    return out


def write_mf6(folder, layers, *, wells: pd.DataFrame | None = None, springs: pd.DataFrame | None = None,
              spring_conductance: float | None = None, name: str = "model") -> dict:
    """Write a MODFLOW 6 simulation of ``layers`` into ``folder`` (see the module docstring); return a summary.

    Parameters
    ----------
    folder : path of the simulation folder (created when missing; the files are written in a temporary folder
        beside it and moved in when all are written).
    layers : :class:`hydroatlas.layering.ModelLayers`
    wells : DataFrame of :func:`pumping_now`, optional
    springs : DataFrame with columns spring_id, x, y, elev (model length unit), optional
    spring_conductance : float
        Drain conductance of each spring cell, model length squared per day; needed when a spring lies in the
        grid.
    name : str
        Simulation and model name, made valid by :func:`model_name` (the summary gives the name used).

    Returns
    -------
    dict with the folder, the name, the files, the placed and left-out wells and springs, the conductance and
    notes on time, solver and running; also written to ``hydroatlas_mf6.json`` in the folder.
    """
    try:
        import flopy
    except ImportError:
        raise ParameterError("writing a MODFLOW 6 simulation needs flopy: pip install 'hydroatlas[mf6]'") from None
    name = model_name(name)
    arrays = check_layers(layers)
    wells_in, wells_out = place_wells(layers, arrays, wells if wells is not None else pumping_now(None, None, None))
    springs_in, springs_out = ([], []) if springs is None or springs.empty else place_springs(layers, arrays, springs)
    L = layers.length_unit
    if springs_in:
        if spring_conductance is None:
            raise ParameterError(f"{len(springs_in)} spring(s) lie in the grid: give their drain conductance "
                                 f"(spring_conductance=, {L}2/d)", param="spring_conductance")
        if not (np.isfinite(spring_conductance) and spring_conductance > 0):
            raise ParameterError(f"spring_conductance= must be > 0 and finite; got {spring_conductance}",
                                 param="spring_conductance")
    a = _filled(arrays)
    folder = Path(folder)
    ensure_folder(folder.parent)
    tmp = folder.parent / f".{folder.name[:40]}.{secrets.token_hex(6)}.part"
    try:
        sim = flopy.mf6.MFSimulation(sim_name=name, sim_ws=str(tmp), exe_name="mf6", verbosity_level=0)
        # every number in E format with 17 significant digits, so a float64 written as text reads back to the same
        # number (flopy's default prints 9 digits, and mid-range numbers with a fixed count of decimals)
        sim.simulation_data.float_precision = 16
        sim.simulation_data.float_characters = 24
        sim.simulation_data.set_sci_note_lower_thres(math.inf)
        flopy.mf6.ModflowTdis(sim, time_units="days", nper=1, perioddata=[(1.0, 1, 1.0)])
        flopy.mf6.ModflowIms(sim)
        gwf = flopy.mf6.ModflowGwf(sim, modelname=name, save_flows=True)
        flopy.mf6.ModflowGwfdis(gwf, length_units=LENGTH_UNITS[L][1], nlay=len(layers.units), nrow=int(layers.nrow),
                                ncol=int(layers.ncol), delr=float(layers.cell), delc=float(layers.cell),
                                top=a["top"], botm=a["botm"], idomain=a["idomain"], xorigin=float(layers.x0),
                                yorigin=float(layers.y0), angrot=float(layers.rotation))
        flopy.mf6.ModflowGwfnpf(gwf, icelltype=a["icelltype"], k=a["k"], k33=a["k33"])
        flopy.mf6.ModflowGwfic(gwf, strt=a["strt"])
        if wells_in:
            flopy.mf6.ModflowGwfwel(gwf, boundnames=True, maxbound=len(wells_in), stress_period_data={0: [
                ((w["layer"] - 1, w["row"] - 1, w["col"] - 1), w["rate"], w["boundname"]) for w in wells_in]})
        if springs_in:
            flopy.mf6.ModflowGwfdrn(gwf, boundnames=True, maxbound=len(springs_in), stress_period_data={0: [
                ((s["layer"] - 1, s["row"] - 1, s["col"] - 1), s["elev"], float(spring_conductance), s["boundname"])
                for s in springs_in]})
        flopy.mf6.ModflowGwfoc(gwf, head_filerecord=f"{name}.hds", budget_filerecord=f"{name}.cbc",
                               saverecord=[("HEAD", "ALL"), ("BUDGET", "ALL")])
        sim.write_simulation(silent=True)
        files = sorted(p.name for p in tmp.iterdir() if p.is_file())
        ensure_folder(folder)
        for f in files:
            os.replace(tmp / f, output_path(folder, f))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    summary = {
        "folder": str(folder), "name": name, "simulation_file": "mfsim.nam", "files": files,
        "length_units": LENGTH_UNITS[L][1], "time_units": "days", "steady_state": STEADY_NOTE,
        "packages": ["TDIS", "IMS", "GWF", "DIS", "NPF", "IC"] + (["WEL"] if wells_in else [])
                    + (["DRN"] if springs_in else []) + ["OC"],
        "wells": wells_in, "wells_left_out": wells_out,
        "springs": springs_in, "springs_left_out": springs_out,
        "spring_conductance": None if spring_conductance is None else float(spring_conductance),
        "spring_conductance_unit": f"{L}2/d",
        "rate_unit": f"{L}3/d", "rate_sign": "negative: water taken out of the aquifer",
        "solver": SOLVER_NOTE, "modflow_run": NOT_RUN_NOTE}
    write_text(output_path(folder, SUMMARY_FILE), json.dumps(summary, indent=2))
    return summary
