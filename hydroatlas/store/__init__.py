"""The spatial store: schema, backends and validated importers."""

from __future__ import annotations

import os

from ..errors import StoreError
from .base import Store, StoreSettings, WriteResult
from .geopackage import GeoPackageStore
from .schema import SCHEMA_VERSION
from .upgrade import upgrade_geopackage, version_problem

__all__ = ["Store", "StoreSettings", "WriteResult", "GeoPackageStore", "open_store", "create_store", "upgrade_store"]

_SERVER_SCHEMES = ("postgresql://", "postgresql+psycopg://", "postgres://")


def _is_server_url(location) -> bool:
    """True for a PostgreSQL/PostGIS URL (the server backend, :mod:`hydroatlas.store.postgis`)."""
    return isinstance(location, str) and location.startswith(_SERVER_SCHEMES)


def open_store(location: str | os.PathLike) -> Store:
    """Open an existing store: a GeoPackage path, or a ``postgresql://user@host/db`` URL of a PostGIS store.

    A store of another schema version is refused (an older one names ``hydroatlas upgrade``).
    """
    if _is_server_url(location):
        from .postgis import PostGISStore

        store = PostGISStore.open(location)
    else:
        store = GeoPackageStore.open(location)
    problem = version_problem(store.schema_version, store.location)
    if problem is not None:
        store.close()
        raise problem
    return store


def upgrade_store(location: str | os.PathLike) -> tuple[str, str]:
    """Migrate an older store to this release's schema in one transaction; returns (old, new) versions."""
    if _is_server_url(location):
        from .postgis import PostGISStore

        with PostGISStore.open(location) as store:  # the same checks as opening: reachable, a hydroatlas store
            version = store.schema_version
            if version != SCHEMA_VERSION:  # the PostGIS backend starts at this schema version: nothing older exists
                raise version_problem(version, store.location) or StoreError(
                    f"{store.location} has store schema version {version}; no upgrade path")
        return version, version
    GeoPackageStore.open(location).close()  # the same checks as opening: exists, is a hydroatlas store
    return upgrade_geopackage(location)


def create_store(location: str | os.PathLike, *, crs, length_unit: str = "m",
                 vertical_datum: str = "unspecified") -> Store:
    """Create a new, empty store with its settings: a GeoPackage file, or the tables of a store in the PostgreSQL
    database named by a ``postgresql://`` URL (the database must exist; PostGIS is added to it when missing)."""
    settings = StoreSettings(crs, length_unit, vertical_datum)
    if _is_server_url(location):
        from .postgis import PostGISStore

        return PostGISStore.create(location, settings)
    return GeoPackageStore.create(location, settings)
