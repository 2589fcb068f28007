"""Unit statistics of hydraulic conductivity, effective K and transmissivity.

The numeric functions at the top take numpy arrays; :func:`unit_statistics`
and :func:`well_profiles` take DataFrames prepared by the workflows.
Variances are sample variances (ddof = 1). K is handled in m/s inside and
reported in the unit the caller names.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats as sps

from .assign import unit_ancestors
from .errors import ParameterError
from .quantities import LENGTH_UNITS, k_from_ms, normalize_unit

PER_CHOICES = ("test", "zone", "well")
LN10 = math.log(10.0)


def log_k_summary(k, *, confidence: float = 0.95) -> dict:
    """Summary of positive K values (any one unit; results in that unit).

    Returns n, geometric mean with its Student-t confidence interval
    (exponentiated interval of the mean of log10 K), median, min, max, and the
    mean, sample variance (ddof = 1) and standard deviation of log10 K and ln K.
    Values that need two or more samples are NaN for n = 1.
    """
    k = np.asarray(k, dtype=float).ravel()
    if k.size == 0:
        raise ParameterError("log_k_summary needs at least one K value")
    if not (np.isfinite(k).all() and (k > 0).all()):
        raise ParameterError("K values must be finite and greater than zero")
    lg = np.log10(k)
    n = lg.size
    mean = float(lg.mean())
    var = float(lg.var(ddof=1)) if n > 1 else math.nan
    return log_k_moments_summary(n, mean, var, median=float(np.median(k)), k_min=float(k.min()),
                                 k_max=float(k.max()), confidence=confidence)


def log_k_moments_summary(n: int, log10k_mean: float, log10k_var: float, *, median: float, k_min: float,
                          k_max: float, confidence: float = 0.95) -> dict:
    """:func:`log_k_summary` from the moments of log10 K instead of the values (what a database aggregates).

    Parameters
    ----------
    n : int
        Number of values (>= 1).
    log10k_mean, log10k_var : float
        Mean and sample variance (ddof = 1; ignored for n = 1) of log10 K, K in the unit of the result.
    median, k_min, k_max : float
        Median, minimum and maximum of K in that unit.
    """
    n = int(n)
    if n < 1:
        raise ParameterError("log_k_moments_summary needs at least one K value")
    mean = float(log10k_mean)
    var = float(log10k_var) if n > 1 else math.nan
    std = math.sqrt(var) if n > 1 else math.nan
    if n > 1:
        half = float(sps.t.ppf(0.5 + confidence / 2.0, n - 1)) * std / math.sqrt(n)
        ci = (10 ** (mean - half), 10 ** (mean + half))
    else:
        ci = (math.nan, math.nan)
    return {
        "n": n,
        "k_geomean": 10 ** mean,
        "k_geomean_ci95": ci,
        "k_median": float(median),
        "k_min": float(k_min),
        "k_max": float(k_max),
        "log10k_mean": mean,
        "log10k_var": var,
        "log10k_std": std,
        "lnk_mean": mean * LN10,
        "lnk_var": var * LN10**2,
        "lnk_std": std * LN10,
    }


def transmissivity(k, thickness) -> float:
    """Sum of K times thickness over layers (K and thickness in consistent units)."""
    k, b = _layers(k, thickness)
    return float(np.sum(k * b))


def effective_k(k, thickness) -> tuple[float, float]:
    """Thickness-weighted arithmetic (horizontal) and harmonic (vertical) mean K of a layered profile.

    >>> effective_k([1.0, 100.0], [1.0, 1.0])
    (50.5, 1.9801980198019802)
    """
    k, b = _layers(k, thickness)
    total = b.sum()
    return float(np.sum(k * b) / total), float(total / np.sum(b / k))


def _layers(k, thickness):
    k = np.asarray(k, dtype=float).ravel()
    b = np.asarray(thickness, dtype=float).ravel()
    if k.shape != b.shape or k.size == 0:
        raise ParameterError(f"k and thickness must be non-empty and of one shape; got {k.shape} and {b.shape}")
    if not ((k > 0).all() and (b > 0).all() and np.isfinite(k).all() and np.isfinite(b).all()):
        raise ParameterError("k and thickness must be finite and greater than zero")
    return k, b


def zone_log_means(tests: pd.DataFrame) -> pd.DataFrame:
    """One row per zone: geometric mean of its tests (k_ms), test count, unit and flags."""
    tests = tests.assign(_lg=np.log10(tests["k_ms"].to_numpy(float)))
    g = tests.groupby(["well_id", "zone_id"], sort=False)
    out = g.agg(unit=("unit", "first"), _lg=("_lg", "mean"), n_tests=("_lg", "size")).reset_index()
    out["k_ms"] = 10 ** out.pop("_lg")
    return out


def unit_statistics(tests: pd.DataFrame, units: pd.DataFrame, *, per: str = "test", k_unit: str = "m/d",
                    exclude_straddles: bool = False, exclude_poor: bool = False,
                    confidence: float = 0.95) -> list[dict]:
    """Statistics of K per unit; a parent unit includes the tests of its sub-units.

    Parameters
    ----------
    tests : DataFrame
        One row per K test with well_id, zone_id, unit (assigned), k_ms (m/s),
        quality (good, fair, poor or None) and straddles (bool).
    units : DataFrame
        code, name, rank, role, parent.
    per : {'test', 'zone', 'well'}
        'test': every test counts once; 'zone' / 'well': the mean log K of each
        zone / well counts once (declustering).
    k_unit : str
        Unit of the K figures in the result.

    Returns
    -------
    list of dict
        One per unit in stratigraphic order, with the keys of SPEC section 3
        (variances ddof = 1; NaN where fewer than two values).
    """
    if per not in PER_CHOICES:
        raise ParameterError(f"The 'per' parameter must be one of {', '.join(PER_CHOICES)}. Got {per!r} instead.")
    k_unit = normalize_unit(k_unit, "hydraulic conductivity")
    t = tests
    if exclude_straddles and "straddles" in t:
        t = t[~t["straddles"].fillna(False).astype(bool)]
    if exclude_poor and "quality" in t:
        t = t[t["quality"].ne("poor") | t["quality"].isna()]
    t = t[t["unit"].notna()]
    ancestors = unit_ancestors(units)
    members: dict[str, set[str]] = {c: {c} for c in units["code"]}
    for code, chain in ancestors.items():
        for anc in chain:
            members.setdefault(anc, {anc}).add(code)
    rows = []
    for _, u in units.sort_values("rank").iterrows():
        sub = t[t["unit"].isin(members[u["code"]])]
        row = {"unit": u["code"], "name": u["name"], "role": u["role"], "rank": int(u["rank"]), "per": per,
               "n_tests": int(len(sub)), "n_zones": int(sub[["well_id", "zone_id"]].drop_duplicates().shape[0]),
               "n_wells": int(sub["well_id"].nunique()), "k_unit": k_unit}
        if sub.empty:
            row.update({key: None for key in ("n_values", "k_geomean", "k_geomean_ci95", "k_median", "k_min",
                                              "k_max", "log10k_mean", "log10k_var", "log10k_std", "lnk_mean",
                                              "lnk_var", "lnk_std")})
            rows.append(row)
            continue
        if per == "test":
            values = sub["k_ms"].to_numpy(float)
        else:
            keys = ["well_id", "zone_id"] if per == "zone" else ["well_id"]
            values = (pd.Series(np.log10(sub["k_ms"].to_numpy(float)), index=sub.index)
                      .groupby([sub[k] for k in keys]).mean().to_numpy())
            values = 10 ** values
        s = log_k_summary(k_from_ms(values, k_unit), confidence=confidence)
        row["n_values"] = s.pop("n")
        row.update(s)
        row["k_geomean_ci95"] = list(row["k_geomean_ci95"])
        rows.append(row)
    return rows


def unit_groups(assignment: pd.DataFrame, units: pd.DataFrame, *, exclude_straddles: bool = False) -> pd.DataFrame:
    """The zones whose tests count for each unit: its own zones and those of its sub-units.

    Returns a DataFrame well_id, zone_id, group (the unit code), for ``Store.aggregate_logk``; zones without a
    unit, and with ``exclude_straddles`` the zones that straddle units, are left out (as in
    :func:`unit_statistics`).
    """
    zones = assignment[assignment["unit"].notna()]
    if exclude_straddles and "straddles" in zones:
        zones = zones[~zones["straddles"].fillna(False).astype(bool)]
    members: dict[str, set[str]] = {c: {c} for c in units["code"]}
    for code, chain in unit_ancestors(units).items():
        for anc in chain:
            members.setdefault(anc, {anc}).add(code)
    parts = [zones.loc[zones["unit"].isin(codes), ["well_id", "zone_id"]].assign(group=code)
             for code, codes in members.items()]
    if not parts:
        return pd.DataFrame(columns=["well_id", "zone_id", "group"])
    return pd.concat(parts, ignore_index=True)


def unit_statistics_from_aggregates(aggregates: pd.DataFrame, units: pd.DataFrame, *, per: str = "test",
                                    k_unit: str = "m/d", confidence: float = 0.95) -> list[dict]:
    """:func:`unit_statistics` from the per-unit moments of log10 K that a store aggregates.

    Parameters
    ----------
    aggregates : DataFrame
        One row per unit code (column ``group``) as ``Store.aggregate_logk`` gives it for the groups of
        :func:`unit_groups`: n_tests, n_zones, n_wells, n_values, log10k_mean and log10k_var (K in m/s),
        k_median_ms, k_min_ms, k_max_ms.
    units : DataFrame
        code, name, rank, role, parent.

    Returns
    -------
    list of dict
        The rows of :func:`unit_statistics` (the same keys and order; equal values to rounding: K is converted
        to ``k_unit`` after the mean of log10 K instead of before).
    """
    if per not in PER_CHOICES:
        raise ParameterError(f"The 'per' parameter must be one of {', '.join(PER_CHOICES)}. Got {per!r} instead.")
    k_unit = normalize_unit(k_unit, "hydraulic conductivity")
    factor = float(k_from_ms(1.0, k_unit))
    shift = math.log10(factor)
    by_code = {r["group"]: r for r in aggregates.to_dict("records")}
    rows = []
    for _, u in units.sort_values("rank").iterrows():
        a = by_code.get(u["code"])
        n_tests = int(a["n_tests"]) if a else 0
        row = {"unit": u["code"], "name": u["name"], "role": u["role"], "rank": int(u["rank"]), "per": per,
               "n_tests": n_tests, "n_zones": int(a["n_zones"]) if a else 0,
               "n_wells": int(a["n_wells"]) if a else 0, "k_unit": k_unit}
        if not n_tests:
            row.update({key: None for key in ("n_values", "k_geomean", "k_geomean_ci95", "k_median", "k_min",
                                              "k_max", "log10k_mean", "log10k_var", "log10k_std", "lnk_mean",
                                              "lnk_var", "lnk_std")})
            rows.append(row)
            continue
        s = log_k_moments_summary(int(a["n_values"]), float(a["log10k_mean"]) + shift, float(a["log10k_var"]),
                                  median=float(a["k_median_ms"]) * factor, k_min=float(a["k_min_ms"]) * factor,
                                  k_max=float(a["k_max_ms"]) * factor, confidence=confidence)
        row["n_values"] = s.pop("n")
        row.update(s)
        row["k_geomean_ci95"] = list(row["k_geomean_ci95"])
        rows.append(row)
    return rows


def well_profiles(zones: pd.DataFrame, *, k_unit: str = "m/d", length_unit: str = "m") -> pd.DataFrame:
    """Transmissivity and effective K over the tested zones of each well.

    Parameters
    ----------
    zones : DataFrame
        One row per tested zone: well_id, zone_id, unit, thickness (store
        length unit), k_ms (the zone's geometric-mean K in m/s).

    Returns
    -------
    DataFrame
        One row per well and unit, plus one row per well with unit '*' over
        all its tested zones: n_zones, tested_thickness (length unit),
        transmissivity (length unit squared per day), kh and kv (k_unit).
        Only tested intervals count: untested parts of the profile are not
        guessed.
    """
    k_unit = normalize_unit(k_unit, "hydraulic conductivity")
    length_unit = normalize_unit(length_unit, "length")
    to_len_per_day = 86_400.0 / LENGTH_UNITS[length_unit]
    records = []
    for (well, unit), g in _profile_groups(zones):
        k_ms = g["k_ms"].to_numpy(float)
        b = g["thickness"].to_numpy(float)
        kh, kv = effective_k(k_ms, b)
        records.append({"well_id": well, "unit": unit, "n_zones": len(g), "tested_thickness": float(b.sum()),
                        "transmissivity": transmissivity(k_ms * to_len_per_day, b),
                        "kh": float(k_from_ms(kh, k_unit)), "kv": float(k_from_ms(kv, k_unit)),
                        "k_unit": k_unit, "t_unit": f"{length_unit}2/d"})
    return pd.DataFrame(records, columns=["well_id", "unit", "n_zones", "tested_thickness", "transmissivity",
                                          "kh", "kv", "k_unit", "t_unit"])


def _profile_groups(zones: pd.DataFrame):
    zones = zones[zones["unit"].notna()]
    for well, g in zones.groupby("well_id", sort=True):
        for unit, gu in g.groupby("unit", sort=False):
            yield (well, unit), gu
        if g["unit"].nunique() > 1:
            yield (well, "*"), g
