"""The backend-neutral store logic (hydroatlas/store/common.py) and each backend's change marker.

Runs on both backends (conftest.py: store_backend). The change marker is what the product registry hashes
(hydroatlas/products.py: table_digests); the checks make every kind of change a writer can make (an import that
adds or corrects, retire, restore, a raw DELETE by another program) and watch it, as tests/test_products.py does
on a GeoPackage. The GeoPackage's digests must stay the ones earlier releases recorded, so they are recomputed
here from the formula in the products module docstring, with Python's hashlib and sqlite3 as the reference.
"""

from __future__ import annotations

import hashlib
import sqlite3

import pytest

from hydroatlas import open_store, products
from hydroatlas.store.common import SQLStore

from conftest import MINI, cli, write_csv
from test_records import direct_sql

#: every table a product is made from (the registry's own declaration)
INPUT = sorted({t for tables in products.INPUT_TABLES.values() for t in tables})


@pytest.fixture
def mini_store(any_mini_store):
    return any_mini_store


def _ok(runner, *args):
    res = cli(runner, *args)
    assert res.exit_code == 0, res.output
    return res


def _markers(store):
    with open_store(store) as s:
        return {t: s.change_marker(t) for t in ("heads", "units", "ktests")}


def test_both_backends_share_one_implementation(mini_store):
    with open_store(mini_store) as s:
        assert isinstance(s, SQLStore)
        for name in ("read", "find_records", "retired", "record_versions", "log_import", "_active_conditions"):
            assert getattr(type(s), name) is getattr(SQLStore, name), name


def test_change_marker_follows_every_kind_of_change(mini_store, mini_files, runner):
    """Insert, update, retire, restore and a raw delete each change the marker of their table and of no other;
    an import that changes nothing changes nothing."""
    seen = [_markers(mini_store)]
    _ok(runner, "import", mini_store, "heads", mini_files / "heads.csv")  # unchanged file: nothing written
    assert _markers(mini_store) == seen[0]
    rows = [list(r) for r in MINI["heads.csv"]]
    rows[1][3] = 291.0  # W1/P1 at 2024-06-01T10:00:00 was 290.0
    assert "1 updated" in _ok(runner, "import", mini_store, "heads",
                              write_csv(mini_files / "heads_edit.csv", rows)).output
    steps = [_markers(mini_store)]
    _ok(runner, "retire", mini_store, "heads", "W1/P1/2024-06-01T10:00:00", "--reason", "test")
    steps.append(_markers(mini_store))
    _ok(runner, "restore", mini_store, "heads", "W1/P1/2024-06-01T10:00:00")
    steps.append(_markers(mini_store))
    _ok(runner, "import", mini_store, "heads", write_csv(mini_files / "heads_new.csv", [
        rows[0], ["W1", "P1", "2024-07-01T10:00:00", 289.0, "", "", "good"]]))
    steps.append(_markers(mini_store))
    direct_sql(mini_store, "DELETE FROM heads WHERE measured_at = '2024-07-01T10:00:00'")
    steps.append(_markers(mini_store))
    heads = [seen[0]["heads"]] + [m["heads"] for m in steps]
    assert len(set(heads)) == len(heads), heads  # every step is a change, the restore included
    assert all(m["units"] == seen[0]["units"] and m["ktests"] == seen[0]["ktests"] for m in steps)


def test_geopackage_digests_are_the_earlier_ones(gpkg_mini_store):
    """The digests of a GeoPackage are those earlier releases recorded (products stay fresh across the change):
    SHA-256 of 'table|rows=N|last_fid=F|last_history_fid=H', first 16 hex digits, recomputed by hand."""
    conn = sqlite3.connect(gpkg_mini_store)
    try:
        expected = {}
        for table in INPUT:
            n, last = conn.execute(f'SELECT count(*), max(fid) FROM "{table}"').fetchone()
            hist = conn.execute("SELECT max(fid) FROM record_history WHERE table_name = ?", (table,)).fetchone()[0]
            text = f"{table}|rows={n}|last_fid={last or 0}|last_history_fid={hist or 0}"
            expected[table] = hashlib.sha256(text.encode()).hexdigest()[:16]
    finally:
        conn.close()
    assert len(set(expected.values())) == len(INPUT)
    with open_store(gpkg_mini_store) as s:
        assert products.table_digests(s, INPUT) == expected
