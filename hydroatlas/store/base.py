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
