"""Head selection by time window or date, head profiles and vertical differences at multi-zone wells.

Pure functions over DataFrames. Heads and elevations are in the store's
length unit; K in m/s on input.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import InsufficientDataError, ParameterError


# A date or date-time as ISO 8601 extended format, at least YYYY-MM-DD: a bare year or year-month is refused
# (pandas would read '2024' as 2024-01-01 and silently turn a year into one day).
_ISO_INSTANT = re.compile(r"\d{4}-\d{2}-\d{2}"
                          r"(?P<time>[T ]\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?(?:Z|[+-]\d{2}(?::?\d{2})?)?)?")
_DATE_HINT = "give a date YYYY-MM-DD or a date-time YYYY-MM-DDThh:mm[:ss][+hh:mm]"


def parse_instant(text: str, *, name: str = "date") -> tuple[pd.Timestamp, bool]:
    """An ISO 8601 date or date-time (at least YYYY-MM-DD) as a naive UTC timestamp.

    Parameters
    ----------
    text : str
        e.g. '2024-03-01', '2024-03-01T10:00', '2024-03-01T10:00:00+02:00'.
    name : str
        What the text is, for the error message (e.g. '--at').

    Returns
    -------
    (Timestamp, bool)
        The instant (offsets converted to UTC, then dropped) and whether a time of day was given.

    Raises
    ------
    ParameterError
        For anything else, a bare year or year-month included.
    """
    match = _ISO_INSTANT.fullmatch(text.strip()) if isinstance(text, str) else None
    if match is None:
        raise ParameterError(f"{name} {text!r} is not an ISO 8601 date; {_DATE_HINT}")
    try:
        stamp = pd.to_datetime(text.strip().replace(",", "."), format="ISO8601")
    except (ValueError, TypeError):
        raise ParameterError(f"{name} {text!r} is not a valid date; {_DATE_HINT}") from None
    if stamp.tzinfo is not None:
        stamp = stamp.tz_convert("UTC").tz_localize(None)
    return stamp, match.group("time") is not None


@dataclass(frozen=True)
class TimeWindow:
    """A closed time interval; a date-only end includes that whole day."""

    start: pd.Timestamp
    end: pd.Timestamp
    text: str

    @classmethod
    def parse(cls, text: str, *, name: str = "window") -> "TimeWindow":
        """Parse an ISO 8601 interval 'FROM/TO', e.g. '2024-03-01/2024-03-31'; each end at least YYYY-MM-DD.

        ``name`` says what the text is in error messages (e.g. '--window').
        """
        if not isinstance(text, str) or text.count("/") != 1:
            raise ParameterError(f"{name} {text!r} is not an ISO 8601 interval FROM/TO (e.g. 2024-03-01/2024-03-31)")
        a, b = (s.strip() for s in text.split("/"))
        where = f"{name} {text!r}:"
        start, _ = parse_instant(a, name=f"{where} start")
        end, end_has_time = parse_instant(b, name=f"{where} end")
        if not end_has_time:  # a date: include the whole day
            end = end + pd.Timedelta(days=1) - pd.Timedelta(seconds=1)
        if end < start:
            raise ParameterError(f"{name} {text!r} ends before it starts")
        return cls(start, end, text)


def select_heads(heads: pd.DataFrame, *, window: TimeWindow | None = None, at: str | None = None,
                 tolerance_days: float | None = None) -> pd.DataFrame:
    """One head per zone: the median inside ``window``, the reading nearest ``at``, or the median of all.

    This is the arithmetic only; which readings may take part (quality, pumping wells, excluded wells)
    is decided by :func:`hydroatlas.selection.select_heads`, which calls this.

    Parameters
    ----------
    heads : DataFrame
        well_id, zone_id, measured_at (ISO text), head.
    tolerance_days : float, optional
        With ``at``: a zone whose nearest reading lies more than this many days from ``at`` gets no head
        (it is left out of the result). None: no limit.

    Returns
    -------
    DataFrame
        well_id, zone_id, head, n_readings, first, last (and offset_days for ``at``).
    """
    if window is not None and at is not None:
        raise ParameterError("give a window or a date, not both")
    if tolerance_days is not None and not (isinstance(tolerance_days, (int, float, np.number))
                                           and np.isfinite(tolerance_days) and tolerance_days >= 0):
        raise ParameterError(f"the tolerance must be a number of days >= 0 and finite (got {tolerance_days})")
    h = heads[["well_id", "zone_id", "measured_at", "head"]].reset_index(drop=True)
    h["t"] = pd.to_datetime(h["measured_at"], format="ISO8601")
    if at is not None:
        t0, _ = parse_instant(at, name="date")
        if h.empty:
            raise InsufficientDataError("there are no head readings")
        h["offset_days"] = (h["t"] - t0).abs() / pd.Timedelta(days=1)
        h = h.sort_values(["well_id", "zone_id", "offset_days", "t"])
        out = h.groupby(["well_id", "zone_id"], sort=True).head(1)
        if tolerance_days is not None:
            near = out["offset_days"] <= float(tolerance_days)
            if not near.any():
                raise InsufficientDataError(
                    f"no zone has a head reading within {float(tolerance_days):g} days of {at} (the nearest is "
                    f"{float(out['offset_days'].min()):.0f} days away); give a wider tolerance_days= or another date",
                    param="tolerance_days")
            out = out[near]
        out = out.assign(n_readings=1, first=out["measured_at"], last=out["measured_at"])
        return out[["well_id", "zone_id", "head", "n_readings", "first", "last", "offset_days"]].reset_index(drop=True)
    if window is not None:
        h = h[(h["t"] >= window.start) & (h["t"] <= window.end)]
        if h.empty:
            raise InsufficientDataError(f"no head readings inside the window {window.text}")
    elif h.empty:
        raise InsufficientDataError("there are no head readings")
    g = h.groupby(["well_id", "zone_id"], sort=True)
    # first/last through the datetime column: min/max of text columns falls back to slow Python aggregation
    out = g.agg(head=("head", "median"), n_readings=("head", "size"), first=("t", "idxmin"),
                last=("t", "idxmax")).reset_index()
    out["first"] = h["measured_at"].loc[out["first"].to_numpy()].to_numpy()
    out["last"] = h["measured_at"].loc[out["last"].to_numpy()].to_numpy()
    return out


def head_profiles(zone_heads: pd.DataFrame, assignment: pd.DataFrame) -> pd.DataFrame:
    """Zones with a selected head at wells with two or more such zones, ordered top down."""
    z = zone_heads.merge(assignment[["well_id", "zone_id", "unit", "top_elev", "bottom_elev", "mid_elev"]],
                         on=["well_id", "zone_id"])
    counts = z.groupby("well_id")["zone_id"].transform("size")
    z = z[counts >= 2]
    return z.sort_values(["well_id", "mid_elev"], ascending=[True, False]).reset_index(drop=True)


def vertical_differences(profiles: pd.DataFrame, units: pd.DataFrame, unit_k_ms: dict[str, float],
                         intervals: pd.DataFrame, *, length_to_m: float = 1.0) -> pd.DataFrame:
    """Head differences, vertical gradients and aquitard leakage between successive zones of each well.

    Parameters
    ----------
    profiles : DataFrame
        From :func:`head_profiles`.
    units : DataFrame
        code, rank, role.
    unit_k_ms : dict
        Representative (geometric-mean) K in m/s of each unit, used as its vertical K.
    intervals : DataFrame
        well_id, unit, top_elev, bottom_elev of each unit at each well (from picks).
    length_to_m : float
        Metres per store length unit.

    Returns
    -------
    DataFrame
        well_id, upper_zone, lower_zone, upper_unit, lower_unit, upper_head, lower_head,
        dhead (upper minus lower), distance (between zone midpoints), vertical_gradient
        (dhead / distance, positive downward flow), aquitards, leakage_flux (Darcy flux
        dhead / sum(b_j / K_j) over the aquitard and confining units between the zones, b_j the
        part of unit j between the two zone midpoints, in length unit per day; positive downward).
    """
    rank = dict(zip(units["code"], units["rank"]))
    role = dict(zip(units["code"], units["role"]))
    span = {(w, u): (t, b) for w, u, t, b in
            intervals[["well_id", "unit", "top_elev", "bottom_elev"]].itertuples(index=False)}
    tight = {c for c, r in role.items() if r in ("aquitard", "confining")}
    rows = []
    for well, g in profiles.groupby("well_id", sort=True):
        g = g.reset_index(drop=True)
        for i in range(len(g) - 1):
            up, lo = g.iloc[i], g.iloc[i + 1]
            dist = float(up["mid_elev"] - lo["mid_elev"])
            dh = float(up["head"] - lo["head"])
            r_up, r_lo = rank.get(up["unit"]), rank.get(lo["unit"])
            between = []
            if r_up is not None and r_lo is not None:
                between = sorted((c for c in tight if min(r_up, r_lo) <= rank[c] <= max(r_up, r_lo)),
                                 key=rank.get)
            flux = np.nan
            if between:
                resist = 0.0
                for c in between:
                    top, bot = span.get((well, c), (np.nan, np.nan))
                    b = min(top, float(up["mid_elev"])) - max(bot, float(lo["mid_elev"]))
                    b = max(b, 0.0) if np.isfinite(b) else np.nan
                    k = unit_k_ms.get(c, np.nan)
                    resist += b / (k * 86_400.0 / length_to_m)  # days
                flux = dh / resist if resist > 0 and np.isfinite(resist) else np.nan
            rows.append({"well_id": well, "upper_zone": up["zone_id"], "lower_zone": lo["zone_id"],
                         "upper_unit": up["unit"], "lower_unit": lo["unit"],
                         "upper_head": float(up["head"]), "lower_head": float(lo["head"]), "dhead": dh,
                         "distance": dist, "vertical_gradient": dh / dist if dist > 0 else np.nan,
                         "aquitards": ",".join(between) or None, "leakage_flux": flux})
    cols = ["well_id", "upper_zone", "lower_zone", "upper_unit", "lower_unit", "upper_head", "lower_head",
            "dhead", "distance", "vertical_gradient", "aquitards", "leakage_flux"]
    return pd.DataFrame(rows, columns=cols)


def darcy_leakage(k_v, dhead, thickness):
    """Darcy flux across an aquitard, q = K_v * dhead / thickness (consistent units)."""
    k_v, dhead, thickness = (np.asarray(a, float) for a in (k_v, dhead, thickness))
    if np.any(thickness <= 0) or np.any(k_v <= 0):
        raise ParameterError("aquitard thickness and K_v must be > 0")
    return k_v * dhead / thickness
