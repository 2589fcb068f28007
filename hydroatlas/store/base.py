"""The store interface that every backend (GeoPackage now, PostGIS later) implements."""

from __future__ import annotations

from abc import ABC, abstractmethod
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Callable, Iterator

import pandas as pd
from pyproj import CRS
from pyproj.exceptions import CRSError

from ..errors import ParameterError
from ..quantities import normalize_unit


@dataclass(frozen=True)
class StoreSettings:
    """Project settings kept in the store.

    Attributes
    ----------
    crs : pyproj.CRS
        Horizontal CRS of every x, y and geometry in the store.
    length_unit : str
        Unit of depths, elevations and heads ('m' or 'ft').
    vertical_datum : str
        Free label of the vertical datum of elevations and heads.
    """

    crs: CRS
    length_unit: str = "m"
    vertical_datum: str = "unspecified"

    def __post_init__(self):
        try:
            object.__setattr__(self, "crs", CRS.from_user_input(self.crs))
        except CRSError:
            raise ParameterError(f"{self.crs!r} is not a CRS that pyproj knows (try EPSG:NNNN)") from None
        object.__setattr__(self, "length_unit", normalize_unit(self.length_unit, "length"))
        if not self.crs.is_projected and not self.crs.is_geographic:
            raise ParameterError(f"the store CRS must be a projected or geographic 2-D CRS, got {self.crs.name}")


@dataclass(frozen=True)
class WriteResult:
    rows: int
    inserted: int
    updated: int


class Store(ABC):
    """A hydroatlas store: settings plus the tables of :mod:`hydroatlas.store.schema`.

    Writes happen only inside :meth:`transaction`; if the block raises, nothing
    of it remains.
    """

    settings: StoreSettings
    location: str

    @abstractmethod
    def read(self, table: str, columns: list[str] | None = None) -> pd.DataFrame:
        """All rows of ``table`` (geometry columns excluded) as a DataFrame."""

    @abstractmethod
    def read_geometries(self, table: str):
        """A GeoDataFrame of a feature table in the store CRS."""

    @abstractmethod
    def count(self, table: str) -> int:
        """Number of rows of ``table``."""

    @abstractmethod
    @contextmanager
    def transaction(self) -> Iterator["Store"]:
        """Context in which :meth:`upsert` may be called; commits on success, rolls back on error."""

    @abstractmethod
    def upsert(self, table: str, frame: pd.DataFrame, *, geometry=None,
               progress: Callable[[int], None] | None = None) -> WriteResult:
        """Insert rows, updating rows whose natural key exists and whose values differ."""

    @abstractmethod
    def log_import(self, kind: str, file: str, sha256: str, result: WriteResult) -> None:
        """Record a successful import."""

    @abstractmethod
    def close(self) -> None:
        ...

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- unit statistics: what a server backend computes in its own SQL ------------------------------------------
    #: True when :meth:`aggregate_logk` runs in the database (only one row per group reaches the client)
    sql_aggregates = False

    def aggregate_logk(self, groups: pd.DataFrame, *, per: str = "test", exclude_wells=(),
                       include_poor: bool = False) -> pd.DataFrame:
        """Counts of the active K tests of each group of zones and the moments of their log10 K (K in m/s).

        Parameters
        ----------
        groups : DataFrame
            well_id, zone_id, group: the zones of each group (a unit and its sub-units); a zone may be in
            several groups.
        per : {'test', 'zone', 'well'}
            What one value is: a test, or the mean log10 K of a zone's or a well's tests in the group.
        exclude_wells, include_poor
            The selection policy: tests of these wells, and of quality poor (unless ``include_poor``), are left
            out.

        Returns
        -------
        DataFrame
            One row per group that has tests, sorted by group, with :data:`AGGREGATE_COLUMNS`: n_tests,
            n_zones, n_wells (what the tests cover), n_values, log10k_mean and log10k_var (sample variance,
            ddof = 1; NaN for one value) of the values, and the median, minimum and maximum of the values as K
            in m/s (10 ** the zone's or well's mean for ``per`` zone or well).

        This implementation reads the tests and computes in pandas; the PostGIS backend computes the same in
        SQL.
        """
        tests = self.read("ktests", ["well_id", "zone_id", "k_ms", "quality"])
        keep = ~tests["well_id"].isin(set(exclude_wells))
        if not include_poor:
            keep &= tests["quality"].ne("poor")
        return logk_moments_by_group(tests[keep.to_numpy()], groups, per=per)

    def left_out_ktests(self, *, exclude_wells=(), include_poor: bool = False) -> pd.DataFrame:
        """Active K tests the selection policy leaves out, counted per zone: well_id, zone_id, excluded (True:
        the well is in ``exclude_wells``, the first reason; False: quality poor) and count."""
        tests = self.read("ktests", ["well_id", "zone_id", "quality"])
        excluded = tests["well_id"].isin(set(exclude_wells))
        poor = tests["quality"].eq("poor") if not include_poor else pd.Series(False, index=tests.index)
        hit = (excluded | poor).to_numpy()
        out = tests[hit].assign(excluded=excluded.to_numpy()[hit])
        if out.empty:
            return pd.DataFrame(columns=["well_id", "zone_id", "excluded", "count"])
        counts = out.groupby(["well_id", "zone_id", "excluded"], sort=True, dropna=False).size()
        return counts.rename("count").reset_index()


#: columns of :meth:`Store.aggregate_logk`
AGGREGATE_COLUMNS = ("group", "n_tests", "n_zones", "n_wells", "n_values", "log10k_mean", "log10k_var",
                     "k_median_ms", "k_min_ms", "k_max_ms")


def logk_moments_by_group(tests: pd.DataFrame, groups: pd.DataFrame, *, per: str = "test") -> pd.DataFrame:
    """:meth:`Store.aggregate_logk` of the K tests in ``tests`` (well_id, zone_id, k_ms), in pandas."""
    import numpy as np

    if per not in ("test", "zone", "well"):
        raise ParameterError(f"The 'per' parameter must be one of test, zone, well. Got {per!r} instead.")
    m = tests[["well_id", "zone_id", "k_ms"]].merge(groups[["well_id", "zone_id", "group"]],
                                                     on=["well_id", "zone_id"], how="inner")
    if m.empty:
        return pd.DataFrame(columns=list(AGGREGATE_COLUMNS))
    m["lg"] = np.log10(m["k_ms"].to_numpy(float))
    g = m.groupby("group", sort=True)
    counts = pd.DataFrame({"n_tests": g.size(), "n_wells": g["well_id"].nunique(),
                           "n_zones": m.drop_duplicates(["group", "well_id", "zone_id"]).groupby("group").size()})
    if per == "test":
        v = m[["group", "lg"]].assign(kv=m["k_ms"])
    else:
        keys = ["group", "well_id", "zone_id"] if per == "zone" else ["group", "well_id"]
        v = m.groupby(keys, sort=False)["lg"].mean().reset_index()
        v["kv"] = 10 ** v["lg"]
    gv = v.groupby("group", sort=True)
    out = pd.DataFrame({"n_values": gv.size(), "log10k_mean": gv["lg"].mean(), "log10k_var": gv["lg"].var(ddof=1),
                        "k_median_ms": gv["kv"].median(), "k_min_ms": gv["kv"].min(), "k_max_ms": gv["kv"].max()})
    out = counts.join(out).reset_index().rename(columns={"index": "group"})
    return out[list(AGGREGATE_COLUMNS)]
