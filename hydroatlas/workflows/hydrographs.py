"""Hydrographs: head against time per zone, spring discharge against time (``hydroatlas hydrographs``, issue 14).

Which head readings are drawn is decided by the selection policy (:mod:`hydroatlas.selection`): the readings a
head surface of the same store would use, at every date. Spring discharge readings have no quality flag; all
active (not retired) readings are drawn. Each spring's discharge is shown in the rate unit its readings were
given in most often (the first such unit in reading order on a tie), so the figure reads as the field sheets do.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InsufficientDataError, ParameterError
from ..heads import TimeWindow
from ..selection import SelectionPolicy, select_readings, selection_record
from ..store import Store

HEAD_COLUMNS = ["well_id", "zone_id", "unit", "measured_at", "head", "length_unit"]
DISCHARGE_COLUMNS = ["spring_id", "unit", "measured_at", "discharge", "rate_unit"]
SUMMARY_COLUMNS = ["kind", "well_id", "zone_id", "spring_id", "unit", "n_readings", "first", "last", "min", "max",
                   "value_unit"]


def _ids(value, name: str) -> list[str] | None:
    """A list of ids from a list or a comma-separated text (None stays None)."""
    if value is None:
        return None
    items = value.split(",") if isinstance(value, str) else list(value)
    items = [str(v).strip() for v in items]
    if not items or any(not v for v in items):
        raise ParameterError(f"{name}= holds an empty id ({','.join(items)!r}); give ids separated by commas",
                             param=name)
    return list(dict.fromkeys(items))


def shade_windows(*, window=None, baseline=None, shades=()) -> list[tuple[str, pd.Timestamp, pd.Timestamp]]:
    """The windows to shade as (label, start, end): ``window`` labelled 'window', ``baseline`` 'baseline', then
    each (label, FROM/TO) of ``shades`` under its own label."""
    out = []
    named = [("window", window), ("baseline", baseline)] + [tuple(s) for s in shades or ()]
    for label, text in named:
        if text is None:
            continue
        label = str(label).strip()
        if not label:
            raise ParameterError("shades= holds a window without a label; give LABEL=FROM/TO", param="shades")
        w = text if isinstance(text, TimeWindow) else TimeWindow.parse(text, name=f"{label} window")
        out.append((label, w.start, w.end))
    return out


def rate_unit_of(units: pd.Series) -> str:
    """The rate unit given most often in ``units`` (on a tie, the first of them in order)."""
    counts = units.astype(str).value_counts(sort=False)
    first = {u: i for i, u in reversed(list(enumerate(units.astype(str))))}
    return max(counts.index, key=lambda u: (counts[u], -first[u]))


def hydrograph_data(store: Store, *, wells=None, unit: str | None = None, springs=None,
                    policy: SelectionPolicy | None = None) -> dict:
    """The head readings and spring discharge readings a hydrograph draws, with what the selection left out.

    Parameters
    ----------
    wells : list of str or str, optional
        Well ids (or one comma-separated text); default every well (of ``unit`` when given).
    unit : str, optional
        Only zones assigned to this unit or its sub-units; and, unless ``springs`` is given, only springs that
        issue from it.
    springs : list of str or str, optional
        Spring ids whose discharge to draw; default every spring with discharge readings (of ``unit`` when
        given).
    policy : SelectionPolicy, optional
        Which head readings count (None: the default policy).

    Returns
    -------
    dict
        heads (DataFrame, :data:`HEAD_COLUMNS`, heads in the store's length unit, sorted by well, zone top down,
        time), discharge (DataFrame, :data:`DISCHARGE_COLUMNS`), rate_units ({spring_id: unit}), unit_order
        (every unit code in rank order), selection (policy and the left-out entries of the chosen zones),
        wells_without_readings (chosen wells with no reading after the selection), length_unit,
        vertical_datum.

    Raises
    ------
    ParameterError
        An unknown well, spring or unit.
    InsufficientDataError
        Nothing to draw: no head reading of the chosen zones and no discharge reading of the chosen springs.
    """
    from ..quantities import convert
    from .store_jobs import _unit_members, zone_assignment

    wells, springs = _ids(wells, "wells"), _ids(springs, "springs")
    units = store.read("units").sort_values("rank", kind="stable")
    members = _unit_members(units, unit) if unit is not None else None
    if wells is not None:
        known = set(store.read("wells", ["well_id"], include_retired=True)["well_id"])
        active = set(store.read("wells", ["well_id"])["well_id"])
        unknown = [w for w in wells if w not in known]
        if unknown:
            raise ParameterError(f"wells= names well(s) not in the store: {', '.join(unknown)}", param="wells")
        retired = [w for w in wells if w not in active]
        if retired:
            raise ParameterError(f"wells= names retired well(s): {', '.join(retired)} (hydroatlas restore brings "
                                 "them back)", param="wells")
    asg = zone_assignment(store)
    zones = asg[["well_id", "zone_id", "unit", "mid_elev"]]
    if wells is not None:
        zones = zones[zones["well_id"].isin(wells)]
    if members is not None:
        zones = zones[zones["unit"].isin(members)]
    chosen = set(zip(zones["well_id"], zones["zone_id"]))

    readings, left_out = select_readings(store, policy)
    keep = np.array([(w, z) in chosen for w, z in zip(readings["well_id"], readings["zone_id"])], dtype=bool)
    heads = readings[keep].merge(zones, on=["well_id", "zone_id"], how="left")
    heads["t"] = pd.to_datetime(heads["measured_at"], format="ISO8601", utc=True)
    heads = heads.sort_values(["well_id", "mid_elev", "zone_id", "t"], ascending=[True, False, True, True],
                              kind="stable", na_position="last")
    heads["length_unit"] = store.settings.length_unit
    heads = heads[HEAD_COLUMNS].reset_index(drop=True)
    left_out = [e for e in left_out if (e["well_id"], e["zone_id"]) in chosen]
    with_readings = set(heads["well_id"])
    wells_without = sorted({w for w, _ in chosen} - with_readings) if wells is None else \
        [w for w in wells if w not in with_readings]

    spr = store.read("springs", ["spring_id", "unit"])
    if springs is not None:
        unknown = [s for s in springs if s not in set(spr["spring_id"])]
        if unknown:
            raise ParameterError(f"springs= names spring(s) not in the store (or retired): {', '.join(unknown)}",
                                 param="springs")
        spr = spr[spr["spring_id"].isin(springs)]
    elif members is not None:
        spr = spr[spr["unit"].isin(members)]
    dis = store.read("discharge", ["spring_id", "measured_at", "discharge", "rate_unit", "discharge_m3d"])
    dis = dis[dis["spring_id"].isin(set(spr["spring_id"]))]
    rate_units, parts = {}, []
    for sid, g in dis.groupby("spring_id", sort=True):
        ru = rate_unit_of(g["rate_unit"])
        rate_units[sid] = ru
        same = g["rate_unit"].astype(str).eq(ru).to_numpy()
        value = np.where(same, g["discharge"].to_numpy(float),
                         convert(g["discharge_m3d"].to_numpy(float), "m3/d", ru, "rate"))
        parts.append(pd.DataFrame({"spring_id": sid, "measured_at": g["measured_at"].to_numpy(),
                                   "discharge": value, "rate_unit": ru,
                                   "t": pd.to_datetime(g["measured_at"], format="ISO8601", utc=True).to_numpy()}))
    discharge = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(
        columns=["spring_id", "measured_at", "discharge", "rate_unit", "t"])
    discharge["unit"] = discharge["spring_id"].map(dict(zip(spr["spring_id"], spr["unit"])))
    discharge = discharge.sort_values(["spring_id", "t"], kind="stable")[DISCHARGE_COLUMNS].reset_index(drop=True)
    no_discharge = sorted(set(springs or ()) - set(discharge["spring_id"]))

    if heads.empty and discharge.empty:
        what = ", ".join(x for x in (f"wells {','.join(wells)}" if wells else "",
                                      f"unit {unit}" if unit else "") if x) or "the store"
        why = ""
        if left_out:
            from ..selection import describe

            why = "; " + describe(left_out)[0][1]
        raise InsufficientDataError(f"nothing to draw: no head reading of {what} and no spring discharge "
                                    f"reading{why}")
    return {"heads": heads, "discharge": discharge, "rate_units": rate_units,
            "unit_order": list(units["code"]), "selection": selection_record(policy, left_out),
            "wells_without_readings": wells_without, "springs_without_readings": no_discharge,
            "length_unit": store.settings.length_unit, "vertical_datum": store.settings.vertical_datum}


def hydrograph_summary(data: dict) -> pd.DataFrame:
    """One row per zone and per spring drawn: number of readings, first and last date, range, unit."""
    rows = []
    h = data["heads"]
    for (w, z), g in h.groupby(["well_id", "zone_id"], sort=False):
        rows.append({"kind": "head", "well_id": w, "zone_id": z, "spring_id": None, "unit": g["unit"].iloc[0],
                     "n_readings": int(len(g)), "first": g["measured_at"].iloc[0], "last": g["measured_at"].iloc[-1],
                     "min": float(g["head"].min()), "max": float(g["head"].max()),
                     "value_unit": data["length_unit"]})
    d = data["discharge"]
    for s, g in d.groupby("spring_id", sort=False):
        rows.append({"kind": "discharge", "well_id": None, "zone_id": None, "spring_id": s, "unit": g["unit"].iloc[0],
                     "n_readings": int(len(g)), "first": g["measured_at"].iloc[0], "last": g["measured_at"].iloc[-1],
                     "min": float(g["discharge"].min()), "max": float(g["discharge"].max()),
                     "value_unit": data["rate_units"][s]})
    return pd.DataFrame(rows, columns=SUMMARY_COLUMNS)


def write_hydrographs(store: Store, *, out=".", wells=None, unit: str | None = None, springs=None,
                      window=None, baseline=None, shades=(), policy: SelectionPolicy | None = None) -> dict:
    """Hydrograph figures (PNG and SVG) and the CSV tables of exactly what they draw.

    One figure per well with all its chosen zones (``OUT/<well>_hydrograph.png|svg``), coloured by unit (a
    fixed colour per unit code, by rank, in every figure); one per spring with discharge readings
    (``OUT/<spring>_discharge_hydrograph.png|svg``); ``OUT/hydrograph_heads.csv`` and
    ``OUT/hydrograph_discharge.csv``; a sidecar ``OUT/hydrographs.json`` (windows, units, selection, files).

    Parameters
    ----------
    wells, unit, springs, policy
        As in :func:`hydrograph_data`.
    window, baseline : str or TimeWindow, optional
        ISO 8601 intervals FROM/TO shaded as 'window' and 'baseline'.
    shades : sequence of (label, FROM/TO)
        More windows to shade, each under its own label (e.g. ('drought', '2022-06-01/2022-12-31')).

    Returns
    -------
    dict
        The sidecar: summary (one dict per zone and spring drawn), files, windows, selection and the rest of
        :func:`hydrograph_data`'s scalars.
    """
    from ..export import figures
    from ..export.names import ensure_folder, output_path, unit_path, write_csv
    from ..export.rasters import write_sidecar

    shaded = shade_windows(window=window, baseline=baseline, shades=shades)
    data = hydrograph_data(store, wells=wells, unit=unit, springs=springs, policy=policy)
    out = ensure_folder(out)
    colours = figures.unit_colours(data["unit_order"])
    files: dict = {"heads_csv": str(write_csv(output_path(out, "hydrograph_heads.csv"), data["heads"])),
                   "discharge_csv": str(write_csv(output_path(out, "hydrograph_discharge.csv"),
                                                  data["discharge"])),
                   "wells": {}, "springs": {}}
    for well_id, g in data["heads"].groupby("well_id", sort=False):
        paths = figures.head_hydrograph(unit_path(out, well_id, "hydrograph"), well_id, g, colours=colours,
                                        length_unit=data["length_unit"], vertical_datum=data["vertical_datum"],
                                        shades=shaded)
        files["wells"][well_id] = [str(p) for p in paths]
    for spring_id, g in data["discharge"].groupby("spring_id", sort=False):
        paths = figures.discharge_hydrograph(unit_path(out, spring_id, "discharge_hydrograph"), spring_id, g,
                                             rate_unit=data["rate_units"][spring_id], shades=shaded)
        files["springs"][spring_id] = [str(p) for p in paths]
    summary = hydrograph_summary(data)
    sidecar = {"product": "hydrographs", "store": store.location, "length_unit": data["length_unit"],
               "vertical_datum": data["vertical_datum"], "rate_units": data["rate_units"],
               "wells": None if wells is None else _ids(wells, "wells"), "unit": unit,
               "springs": None if springs is None else _ids(springs, "springs"),
               "shaded_windows": [{"label": label, "from": str(a), "to": str(b)} for label, a, b in shaded],
               "unit_colours": {u: colours[u] for u in dict.fromkeys(data["heads"]["unit"].dropna())},
               "n_head_readings": int(len(data["heads"])), "n_discharge_readings": int(len(data["discharge"])),
               "wells_without_readings": data["wells_without_readings"],
               "springs_without_readings": data["springs_without_readings"],
               "selection": data["selection"], "summary": summary.to_dict("records"), "files": files}
    files["sidecar"] = str(output_path(out, "hydrographs.json"))
    write_sidecar(Path(files["sidecar"]), sidecar)
    return sidecar
