"""The spatial store: schema, backends and validated importers."""

from __future__ import annotations

import os

from ..errors import StoreError
from .base import Store, StoreSettings, WriteResult
from .geopackage import GeoPackageStore
from .upgrade import upgrade_geopackage, version_problem

__all__ = ["Store", "StoreSettings", "WriteResult", "GeoPackageStore", "open_store", "create_store", "upgrade_store"]

_SERVER_SCHEMES = ("postgresql://", "postgresql+psycopg://", "postgres://")


def _is_server_url(location) -> bool:
    return isinstance(location, str) and location.startswith(_SERVER_SCHEMES)


def open_store(location: str | os.PathLike) -> Store:
    """Open an existing store: a GeoPackage path (PostgreSQL/PostGIS URLs are reserved for the server backend).

    A store of another schema version is refused (an older one names ``hydroatlas upgrade``).
    """
    if _is_server_url(location):
        raise StoreError("the PostGIS backend is not part of this release; use a GeoPackage path")
    store = GeoPackageStore.open(location)
    problem = version_problem(store.schema_version, location)
    if problem is not None:
        store.close()
        raise problem
    return store


def upgrade_store(location: str | os.PathLike) -> tuple[str, str]:
    """Migrate an older store to this release's schema in one transaction; returns (old, new) versions."""
    if _is_server_url(location):
        raise StoreError("the PostGIS backend is not part of this release; use a GeoPackage path")
    GeoPackageStore.open(location).close()  # the same checks as opening: exists, is a hydroatlas store
    return upgrade_geopackage(location)


def create_store(location: str | os.PathLike, *, crs, length_unit: str = "m",
                 vertical_datum: str = "unspecified") -> Store:
    """Create a new, empty store with its settings."""
    settings = StoreSettings(crs, length_unit, vertical_datum)
    if _is_server_url(location):
        raise StoreError("the PostGIS backend is not part of this release; use a GeoPackage path")
    return GeoPackageStore.create(location, settings)
