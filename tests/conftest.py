"""Shared fixtures: a small hand-made district written as CSV files, and stores built from it.

The values are invented for the tests (not a check against the outside
world); the checks against published values live in the individual tests.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

import pytest
from click.testing import CliRunner

from hydroatlas.cli import main

CRS = "EPSG:32616"

MINI = {
    "units.csv": [["code", "name", "rank", "role", "parent"],
                  ["TOP", "Top sand", 1, "aquifer", ""],
                  ["MID", "Middle shale", 2, "aquitard", ""],
                  ["LOW", "Lower limestone", 3, "aquifer", ""]],
    "wells.csv": [["well_id", "x", "y", "ground_elev", "total_depth", "kind", "name"],
                  ["W1", 610000, 4100000, 300, 120, "multizone", "North"],
                  ["W2", 612000, 4100000, 310, 60, "monitoring", ""],
                  ["W3", 610000, 4102000, 305, 110, "monitoring", ""],
                  ["W4", 611000, 4101000, 302, 100, "monitoring", "No picks"]],
    "picks.csv": [["well_id", "unit", "top_depth", "bottom_depth"],
                  ["W1", "TOP", 0, 40], ["W1", "MID", 40, 50], ["W1", "LOW", 50, 120],
                  ["W2", "TOP", 0, 45], ["W2", "MID", 45, 55], ["W2", "LOW", 55, 60],
                  ["W3", "TOP", 0, 42], ["W3", "MID", 42, 52], ["W3", "LOW", 52, 110]],
    "zones.csv": [["well_id", "zone_id", "top_depth", "bottom_depth", "kind", "unit"],
                  ["W1", "P1", 10, 20, "port", ""],
                  ["W1", "P2", 42, 48, "packer", ""],
                  ["W1", "P3", 70, 80, "port", ""],
                  ["W2", "S1", 35, 45, "screen", ""],
                  ["W2", "S2", 41, 51, "screen", ""],
                  ["W3", "S1", 20, 30, "screen", "LOW"],
                  ["W4", "S1", 15, 25, "screen", ""]],
    "ktests.csv": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit", "quality", "source"],
                   ["W1", "P1", "2024-05-01", "slug", 2.0, "m/d", "good", "t"],
                   ["W1", "P1", "2024-05-02", "slug", 8.0, "m/d", "good", "t"],
                   ["W1", "P2", "2024-05-03", "packer", 1e-10, "m/s", "good", "t"],
                   ["W1", "P3", "2024-05-04", "slug", 10.0, "ft/d", "fair", "t"],
                   ["W2", "S1", "2024-05-05", "slug", 5.0, "m/d", "good", "t"],
                   ["W2", "S2", "2024-05-06", "slug", 0.001, "cm/s", "poor", "t"],
                   ["W3", "S1", "2024-05-07", "slug", 50, "gpd/ft2", "good", "t"],
                   ["W4", "S1", "2024-05-08", "slug", 4.0, "m/d", "good", "t"]],
    "heads.csv": [["well_id", "zone_id", "measured_at", "head", "depth_to_water", "ref_elev", "quality"],
                  ["W1", "P1", "2024-06-01T10:00:00", 290.0, "", "", "good"],
                  ["W1", "P2", "2024-06-01T10:00:00", 282.0, "", "", "good"],
                  ["W1", "P3", "2024-06-01T10:00:00", 270.0, "", "", "good"],
                  ["W2", "S1", "2024-06-01T10:00", "", 12.5, 310.5, "good"],
                  ["W3", "S1", "2024-06-01", 280.0, "", "", "good"]],
}


def write_csv(path: Path, rows) -> Path:
    path = Path(path)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)
    return path


@pytest.fixture
def mini_files(tmp_path) -> Path:
    folder = tmp_path / "mini"
    folder.mkdir()
    for name, rows in MINI.items():
        write_csv(folder / name, rows)
    return folder


@pytest.fixture
def runner():
    return CliRunner()


def cli(runner, *args):
    return runner.invoke(main, [str(a) for a in args], catch_exceptions=False)


def init_store(location, runner, crs: str = CRS):
    """``hydroatlas init LOCATION --crs CRS`` (a GeoPackage path or a PostGIS URL); returns LOCATION."""
    result = cli(runner, "init", location, "--crs", crs)
    assert result.exit_code == 0, result.output
    return location


def fill_mini(location, mini_files, runner):
    """Import the MINI district into the store at ``location``; returns LOCATION."""
    for kind in ("units", "wells", "picks", "zones", "ktests", "heads"):
        result = cli(runner, "import", location, kind, mini_files / f"{kind}.csv")
        assert result.exit_code == 0, result.output
    return location


@pytest.fixture
def empty_store(tmp_path, runner) -> Path:
    return init_store(tmp_path / "store.gpkg", runner)


@pytest.fixture
def mini_store(empty_store, mini_files, runner) -> Path:
    return fill_mini(empty_store, mini_files, runner)


# GeoPackage stores under names that a module running its tests on both backends does not override
@pytest.fixture
def gpkg_empty_store(tmp_path, runner) -> Path:
    return init_store(tmp_path / "store.gpkg", runner)


@pytest.fixture
def gpkg_mini_store(gpkg_empty_store, mini_files, runner) -> Path:
    return fill_mini(gpkg_empty_store, mini_files, runner)


def require_all() -> bool:
    """CI sets HYDROATLAS_REQUIRE_ALL=1: a missing optional tool is then a failure, not a skip."""
    return os.environ.get("HYDROATLAS_REQUIRE_ALL") == "1"


# -- both backends: one parametrised store fixture ------------------------------------------------------------------
# A store test module runs on the GeoPackage and on PostGIS by taking `any_empty_store` / `any_mini_store`, or by
# overriding `empty_store` / `mini_store` with them (tests/test_importers.py). The PostGIS side starts a throwaway
# PostgreSQL cluster once per session (tests/pg_server.py); where PostgreSQL or PostGIS is missing those tests skip
# with the reason, and HYDROATLAS_REQUIRE_ALL=1 (CI) makes that a failure.
BACKENDS = ("gpkg", "postgis")


def pytest_collection_modifyitems(config, items):
    """Tests on the PostGIS backend carry the `postgis` marker (`pytest -m "not postgis"` leaves them out)."""
    for item in items:
        callspec = getattr(item, "callspec", None)
        on_server = callspec is not None and callspec.params.get("store_backend") == "postgis"
        if on_server or "pg_server" in getattr(item, "fixturenames", ()):
            item.add_marker(pytest.mark.postgis)


@pytest.fixture(scope="session")
def pg_server():
    import pg_server as pgs

    reason = pgs.missing_reason()
    if reason is not None:
        if require_all():
            pytest.fail(f"the PostGIS tests cannot run: {reason} (.ci/run installs PostgreSQL and PostGIS)")
        pytest.skip(f"PostGIS tests skipped: {reason}")
    server = pgs.PGServer.start()
    yield server
    server.stop()


@pytest.fixture
def pg_database(pg_server) -> str:
    """The URL of a fresh PostgreSQL database with PostGIS (dropped after the test)."""
    url = pg_server.new_database()
    yield url
    pg_server.drop_database(url)


@pytest.fixture(params=BACKENDS)
def store_backend(request) -> str:
    return request.param


@pytest.fixture
def store_location(store_backend, tmp_path, request):
    """Where a new store goes on the backend under test: a GeoPackage path, or a fresh PostGIS database URL."""
    if store_backend == "gpkg":
        return tmp_path / "store.gpkg"
    return request.getfixturevalue("pg_database")


@pytest.fixture
def any_empty_store(store_location, runner):
    return init_store(store_location, runner)


@pytest.fixture
def any_mini_store(any_empty_store, mini_files, runner):
    return fill_mini(any_empty_store, mini_files, runner)


# The truth district (tests/truthdistrict.py): fixtures `truth` and `truth_store`.
from truth_fixtures import truth, truth_store  # noqa: E402,F401
