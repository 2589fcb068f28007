"""The spatial store: schema, backends and validated importers."""

from __future__ import annotations

import os

from ..errors import StoreError
from .base import Store, StoreSettings, WriteResult
from .geopackage import GeoPackageStore

__all__ = ["Store", "StoreSettings", "WriteResult", "GeoPackageStore", "open_store", "create_store"]

_SERVER_SCHEMES = ("postgresql://", "postgresql+psycopg://", "postgres://")


def _is_server_url(location) -> bool:
    return isinstance(location, str) and location.startswith(_SERVER_SCHEMES)


def open_store(location: str | os.PathLike) -> Store:
    """Open an existing store: a GeoPackage path (PostgreSQL/PostGIS URLs are reserved for the server backend)."""
    if _is_server_url(location):
        raise StoreError("the PostGIS backend is not part of this release; use a GeoPackage path")
    return GeoPackageStore.open(location)


def create_store(location: str | os.PathLike, *, crs, length_unit: str = "m",
                 vertical_datum: str = "unspecified") -> Store:
    """Create a new, empty store with its settings."""
    settings = StoreSettings(crs, length_unit, vertical_datum)
    if _is_server_url(location):
        raise StoreError("the PostGIS backend is not part of this release; use a GeoPackage path")
    return GeoPackageStore.create(location, settings)
