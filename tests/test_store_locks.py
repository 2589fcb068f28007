"""Several processes on one store: locks, read-only files, damaged files and a writer killed midway.

Sources: SQLite's documentation of WAL mode (https://sqlite.org/wal.html: readers and the writer do not
block each other; a transaction whose commit frame never reached the WAL is ignored at recovery),
of locking and the busy timeout (https://sqlite.org/lockingv3.html, PRAGMA busy_timeout), of the
database file header (https://sqlite.org/fileformat2.html, clause 1.3) and of result codes
(https://sqlite.org/rescode.html: SQLITE_BUSY, SQLITE_READONLY, SQLITE_NOTADB, SQLITE_CORRUPT).
The CLI contract (exit code 2, one line, no "internal error") is SPEC section 3 and STYLE.md rule 1.
"""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from hydroatlas import open_store
from hydroatlas.errors import NotAStoreError, StoreError
from hydroatlas.store import gpkg_sql

from conftest import MINI, cli

HYDROATLAS = [sys.executable, "-c", "from hydroatlas.cli import main; main()"]
LOCKED = "locked by another writer"
NOT_A_STORE = "not a GeoPackage/SQLite file or corrupted"


def _snapshot(path):
    with open_store(path) as s:
        return s.snapshot()


def _heads_csv(path: Path, n: int, well="W1", zone="P1", start="2000-01-01") -> Path:
    """n hourly head readings of one zone (invented values)."""
    times = pd.date_range(start, periods=n, freq="h").strftime("%Y-%m-%dT%H:%M:%S")
    pd.DataFrame({"well_id": well, "zone_id": zone, "measured_at": times,
                  "head": 280.0 + np.sin(np.arange(n) / 50.0)}).to_csv(path, index=False)
    return path


def _hold_write_lock(path) -> sqlite3.Connection:
    """A raw connection inside BEGIN IMMEDIATE with one uncommitted row: another writer, as a GIS would be."""
    con = sqlite3.connect(path, isolation_level=None)
    con.execute("BEGIN IMMEDIATE")
    con.execute("INSERT INTO units (code, name, rank, role, source_file, source_row) "
                "VALUES ('GIS', 'Drawn in a GIS', 9, 'other', 'gis', 1)")
    return con


def _writer_active(path) -> bool:
    """True while another connection holds the write lock (our BEGIN IMMEDIATE fails at once)."""
    con = sqlite3.connect(path, timeout=0, isolation_level=None)
    try:
        con.execute("BEGIN IMMEDIATE")
        con.execute("ROLLBACK")
        return False
    except sqlite3.OperationalError:
        return True
    finally:
        con.close()


# -- one writer holds the lock ------------------------------------------------------------

def test_readers_go_on_while_a_writer_holds_the_lock(mini_store, monkeypatch):
    """WAL: opening and reading the store works during another writer's transaction, without its rows."""
    monkeypatch.setenv(gpkg_sql.BUSY_TIMEOUT_ENV, "5")
    holder = _hold_write_lock(mini_store)
    try:
        start = time.monotonic()
        with open_store(mini_store) as s:
            units = s.read("units")
            assert sorted(units["code"]) == ["LOW", "MID", "TOP"]
            assert s.count("wells") == 4
        assert time.monotonic() - start < 2  # did not wait for the lock
    finally:
        holder.execute("ROLLBACK")
        holder.close()


def test_import_while_locked_is_a_clear_error(mini_store, mini_files, runner, monkeypatch):
    """A second writer waits HYDROATLAS_BUSY_TIMEOUT seconds, then exit 2 naming the lock; store unchanged."""
    before = _snapshot(mini_store)
    monkeypatch.setenv(gpkg_sql.BUSY_TIMEOUT_ENV, "0.3")
    holder = _hold_write_lock(mini_store)
    try:
        start = time.monotonic()
        res = cli(runner, "import", mini_store, "ktests", mini_files / "ktests.csv")
        waited = time.monotonic() - start
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    assert res.exit_code == 2, res.output
    assert LOCKED in res.output and "internal error" not in res.output
    assert "HYDROATLAS_BUSY_TIMEOUT" in res.output
    assert waited >= 0.3
    assert _snapshot(mini_store) == before


def test_locked_rollback_journal_store_is_not_called_corrupt(mini_store, mini_files, runner, monkeypatch):
    """The reported bug: a store in rollback-journal mode (made by an older hydroatlas or rewritten by
    another tool) whose writer is committing (EXCLUSIVE lock) was called 'not a GeoPackage/SQLite file'."""
    con = sqlite3.connect(mini_store, isolation_level=None)
    assert con.execute("PRAGMA journal_mode = DELETE").fetchone() == ("delete",)
    con.execute("BEGIN EXCLUSIVE")  # what a committing writer holds in rollback-journal mode
    monkeypatch.setenv(gpkg_sql.BUSY_TIMEOUT_ENV, "0.2")
    try:
        res = cli(runner, "import", mini_store, "ktests", mini_files / "ktests.csv")
        with pytest.raises(StoreError, match=LOCKED) as info:
            open_store(mini_store)
        assert not isinstance(info.value, NotAStoreError)
    finally:
        con.execute("ROLLBACK")
        con.close()
    assert res.exit_code == 2 and LOCKED in res.output, res.output
    assert "not a" not in res.output
    # with nobody else in the file, the next open moves it to WAL
    with open_store(mini_store) as s:
        assert s._conn.execute("PRAGMA journal_mode").fetchone() == ("wal",)


def test_two_imports_started_together_both_land(mini_store, tmp_path):
    """Both imports queue behind a held lock and both commit once it goes (one waits for the other)."""
    files = [_heads_csv(tmp_path / "heads_w2.csv", 4000, "W2", "S1"),
             _heads_csv(tmp_path / "heads_w3.csv", 4000, "W3", "S1")]
    env = {k: v for k, v in os.environ.items() if k != gpkg_sql.BUSY_TIMEOUT_ENV}
    holder = _hold_write_lock(mini_store)
    try:
        procs = [subprocess.Popen(HYDROATLAS + ["import", str(mini_store), "heads", str(f)], env=env,
                                  stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) for f in files]
        time.sleep(2.0)  # both start, validate their file and wait for the lock
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    outputs = [p.communicate(timeout=120) for p in procs]
    for p, (out, err) in zip(procs, outputs):
        assert p.returncode == 0, err
        assert "4000 new" in out
    with open_store(mini_store) as s:
        heads = s.read("heads")
        assert len(heads) == len(MINI["heads.csv"]) - 1 + 8000
        assert {"heads_w2.csv", "heads_w3.csv"} <= set(s.read("imports")["file"])


def test_busy_timeout_setting(monkeypatch, mini_store, runner, mini_files):
    monkeypatch.delenv(gpkg_sql.BUSY_TIMEOUT_ENV, raising=False)
    assert gpkg_sql.busy_timeout_s() == 30.0
    monkeypatch.setenv(gpkg_sql.BUSY_TIMEOUT_ENV, "2.5")
    assert gpkg_sql.busy_timeout_s() == 2.5
    with open_store(mini_store) as s:
        assert s._conn.execute("PRAGMA busy_timeout").fetchone() == (2500,)
    monkeypatch.setenv(gpkg_sql.BUSY_TIMEOUT_ENV, "soon")
    res = cli(runner, "import", mini_store, "ktests", mini_files / "ktests.csv")
    assert res.exit_code == 2 and "HYDROATLAS_BUSY_TIMEOUT must be a number of seconds" in res.output


# -- damaged and read-only files ----------------------------------------------------------

def _damaged_files(tmp_path, mini_store) -> dict[str, Path]:
    assert not Path(str(mini_store) + "-wal").exists()  # closed cleanly: everything is in the main file
    rng = np.random.default_rng(9)
    data = mini_store.read_bytes()
    files = {}
    files["random bytes"] = tmp_path / "random.gpkg"
    files["random bytes"].write_bytes(rng.bytes(8192))
    files["sqlite header, garbage after"] = tmp_path / "garbage.gpkg"
    files["sqlite header, garbage after"].write_bytes(data[:100] + rng.bytes(len(data) - 100))
    files["truncated"] = tmp_path / "truncated.gpkg"
    files["truncated"].write_bytes(data[: len(data) // 2])
    files["header only"] = tmp_path / "header.gpkg"
    files["header only"].write_bytes(data[:60])
    return files


def test_damaged_files_give_a_clear_error(tmp_path, mini_store, runner, mini_files):
    """Random bytes, garbage behind a valid header, a store cut in half: exit 2, 'not a GeoPackage/SQLite
    file or corrupted', never an internal error nor a claim that the store is locked."""
    for what, path in _damaged_files(tmp_path, mini_store).items():
        res = cli(runner, "import", path, "ktests", mini_files / "ktests.csv")
        assert res.exit_code == 2, (what, res.output)
        assert NOT_A_STORE in res.output and "internal error" not in res.output, (what, res.output)
        with pytest.raises(NotAStoreError, match=NOT_A_STORE):
            open_store(path)
    res = cli(runner, "import", tmp_path / "truncated.gpkg", "ktests", mini_files / "ktests.csv")
    assert "truncated" in res.output


def test_read_only_store(mini_store, mini_files, runner, monkeypatch, tmp_path):
    """A store this process may not write (root ignores chmod, so the store is opened with SQLite's
    mode=ro as it is for a file without write permission): reading works, an import is exit 2 naming
    the permissions, and nothing changes."""
    before = _snapshot(mini_store)
    monkeypatch.setattr(gpkg_sql, "is_writable", lambda path: False)
    with open_store(mini_store) as s:
        assert s.count("wells") == 4
    res = cli(runner, "import", mini_store, "ktests", mini_files / "ktests.csv")
    assert res.exit_code == 2, res.output
    assert "read-only (permissions)" in res.output and "internal error" not in res.output
    monkeypatch.undo()
    assert _snapshot(mini_store) == before
    # the raw SQLite error is recognised whatever produced it
    con = sqlite3.connect(Path(mini_store).resolve().as_uri() + "?mode=ro", uri=True)
    with pytest.raises(sqlite3.OperationalError) as info:
        con.execute("DELETE FROM units")
    con.close()
    err = gpkg_sql.friendly_sqlite_error(info.value, mini_store)
    assert isinstance(err, StoreError) and "read-only (permissions)" in str(err)
    if hasattr(os, "geteuid") and os.geteuid() != 0:  # a real read-only file, where permissions bite
        os.chmod(mini_store, 0o444)
        try:
            res = cli(runner, "import", mini_store, "ktests", mini_files / "ktests.csv")
            assert res.exit_code == 2 and "read-only (permissions)" in res.output, res.output
        finally:
            os.chmod(mini_store, 0o644)


def test_friendly_errors_only_for_what_a_user_can_act_on(tmp_path):
    """SQLite result codes: BUSY/LOCKED, READONLY, NOTADB/CORRUPT, CANTOPEN get messages; a bug does not."""
    con = sqlite3.connect(":memory:")
    with pytest.raises(sqlite3.OperationalError) as info:
        con.execute("SELECT * FROM no_such_table")
    assert gpkg_sql.friendly_sqlite_error(info.value, "x.gpkg") is None
    missing = tmp_path / "no" / "folder" / "s.gpkg"
    with pytest.raises(sqlite3.OperationalError) as info:
        sqlite3.connect(missing).execute("PRAGMA user_version = 1")
    err = gpkg_sql.friendly_sqlite_error(info.value, missing)
    assert isinstance(err, StoreError) and "cannot open the store" in str(err)


# -- kill -9 ----------------------------------------------------------------------------------

@pytest.fixture
def big_heads(tmp_path):
    return _heads_csv(tmp_path / "big_heads.csv", 300_000)


def _start_import(store, csv):
    return subprocess.Popen(HYDROATLAS + ["import", str(store), "heads", str(csv)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)


def _check_after_kill(store, before, runner, mini_files, *, allow_complete=False):
    con = sqlite3.connect(store)  # recovers the WAL left behind
    assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
    assert con.execute("PRAGMA foreign_key_check").fetchall() == []
    con.close()
    after = _snapshot(store)
    if after != before:
        assert allow_complete, "a killed import left part of itself behind"
        assert len(after["heads"]) == len(before["heads"]) + 300_000  # all of it: it had committed
        assert len(after["imports"]) == len(before["imports"]) + 1
    # no stale lock: the store takes the next import
    res = cli(runner, "import", store, "ktests", mini_files / "ktests.csv")
    assert res.exit_code == 0, res.output
    return after == before


@pytest.mark.slow
def test_kill_9_while_importing_leaves_store_as_before(mini_store, big_heads, runner, mini_files):
    """SIGKILL inside the import's write transaction (300,000 head rows): integrity_check ok and every
    table exactly as before."""
    before = _snapshot(mini_store)
    proc = _start_import(mini_store, big_heads)
    deadline = time.monotonic() + 120
    while not _writer_active(mini_store):
        assert proc.poll() is None, proc.stderr.read()
        assert time.monotonic() < deadline
        time.sleep(0.005)
    time.sleep(0.2)  # well inside the inserts, which take over a second
    proc.send_signal(signal.SIGKILL)
    assert proc.wait(timeout=30) == -signal.SIGKILL
    assert _check_after_kill(mini_store, before, runner, mini_files)


@pytest.mark.slow
def test_kill_9_while_committing_leaves_a_whole_store(mini_store, big_heads, runner, mini_files):
    """SIGKILL once the commit is writing the WAL: SQLite ignores frames without a commit frame, so the
    store is as before, or (if the last frame made it) holds the whole import, never part of it."""
    before = _snapshot(mini_store)
    wal = Path(str(mini_store) + "-wal")
    proc = _start_import(mini_store, big_heads)
    deadline = time.monotonic() + 120
    while not (wal.exists() and wal.stat().st_size > 2_000_000):
        assert proc.poll() is None, "the import ended before its WAL grew: " + proc.stderr.read().decode()
        assert time.monotonic() < deadline
    proc.send_signal(signal.SIGKILL)
    assert proc.wait(timeout=30) == -signal.SIGKILL
    _check_after_kill(mini_store, before, runner, mini_files, allow_complete=True)


# -- PostGIS: several writers on one server store ----------------------------------------------------------------------
# Sources: PostgreSQL's documentation of transaction isolation (REPEATABLE READ: "a repeatable read transaction
# cannot modify or lock rows changed by other transactions after the repeatable read transaction began", which
# fails with SQLSTATE 40001), of INSERT ... ON CONFLICT, and of lock_timeout (SQLSTATE 55P03).

@pytest.fixture
def pg_mini(pg_database, mini_files, runner):
    from conftest import fill_mini, init_store

    return fill_mini(init_store(pg_database, runner), mini_files, runner)


def _pg_wait_for_lock_wait(url, timeout=60.0):
    """Until another session of the database waits for a lock (the import met the held row)."""
    import psycopg

    deadline = time.monotonic() + timeout
    with psycopg.connect(url, autocommit=True) as conn:
        while time.monotonic() < deadline:
            if conn.execute("SELECT count(*) FROM pg_stat_activity WHERE datname = current_database() "
                            "AND wait_event_type = 'Lock'").fetchone()[0]:
                return
            time.sleep(0.05)
    raise AssertionError("no session came to wait for the held row")


def _pg_hold_row(url):
    """Another writer (psql, a GIS) inside a transaction that changed well W1 and has not committed."""
    import psycopg

    holder = psycopg.connect(url)
    holder.execute("UPDATE wells SET ground_elev = 301 WHERE well_id = 'W1'")
    return holder


def _wells_file(path, elev_w1=305.0):
    rows = [list(r) for r in MINI["wells.csv"]]
    rows[1][3] = elev_w1
    pd.DataFrame(rows[1:], columns=rows[0]).to_csv(path, index=False)
    return path


def test_postgis_two_imports_at_once_both_land(pg_mini, tmp_path):
    """Two imports into one server store at the same time (other wells' readings): neither waits for the other
    and both commit."""
    files = [_heads_csv(tmp_path / "heads_w2.csv", 4000, "W2", "S1"),
             _heads_csv(tmp_path / "heads_w3.csv", 4000, "W3", "S1")]
    procs = [subprocess.Popen(HYDROATLAS + ["import", pg_mini, "heads", str(f)], stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True) for f in files]
    for p in procs:
        out, err = p.communicate(timeout=300)
        assert p.returncode == 0, err
        assert "4000 new" in out
    with open_store(pg_mini) as s:
        assert len(s.read("heads")) == len(MINI["heads.csv"]) - 1 + 8000
        assert {"heads_w2.csv", "heads_w3.csv"} <= set(s.read("imports")["file"])


def test_postgis_same_record_changed_at_once_is_a_clear_error(pg_mini, tmp_path):
    """An import meets a record that another transaction changed after the import began: it waits for that
    transaction, then stops with exit 2 and one line naming the record; nothing of it is kept and the other
    writer's value stands (no silent overwrite)."""
    path = _wells_file(tmp_path / "wells.csv")
    with open_store(pg_mini) as s:
        n_imports = len(s.read("imports"))
    holder = _pg_hold_row(pg_mini)
    try:
        proc = subprocess.Popen(HYDROATLAS + ["import", pg_mini, "wells", str(path)], stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True)
        _pg_wait_for_lock_wait(pg_mini)
        holder.commit()
        out, err = proc.communicate(timeout=120)
    finally:
        holder.close()
    assert proc.returncode == 2, (out, err)
    assert err.count("\n") == 1 and "wells record W1" in err and "nothing of this import was kept" in err, err
    with open_store(pg_mini) as s:
        assert s.read("wells").set_index("well_id").loc["W1", "ground_elev"] == 301
        assert len(s.read("imports")) == n_imports
    res = subprocess.run(HYDROATLAS + ["import", pg_mini, "wells", str(path)], capture_output=True, text=True)
    assert res.returncode == 0 and "1 updated" in res.stdout, res.stderr  # run again: it lands
    with open_store(pg_mini) as s:
        assert [v["ground_elev"] for v in s.record_versions("wells", "W1")] == [300, 301, 305]


def test_postgis_lock_held_too_long_is_a_clear_error(pg_mini, tmp_path, monkeypatch):
    """A writer that keeps the row past HYDROATLAS_BUSY_TIMEOUT: exit 2 naming the lock; store unchanged."""
    path = _wells_file(tmp_path / "wells.csv")
    with open_store(pg_mini) as s:
        before = s.snapshot()
    holder = _pg_hold_row(pg_mini)
    try:
        env = {**os.environ, gpkg_sql.BUSY_TIMEOUT_ENV: "0.5"}
        start = time.monotonic()
        res = subprocess.run(HYDROATLAS + ["import", pg_mini, "wells", str(path)], capture_output=True, text=True,
                             env=env, timeout=120)
        waited = time.monotonic() - start
    finally:
        holder.rollback()
        holder.close()
    assert res.returncode == 2 and LOCKED in res.stderr and "HYDROATLAS_BUSY_TIMEOUT" in res.stderr, res.stderr
    assert waited >= 0.5
    with open_store(pg_mini) as s:
        assert s.snapshot() == before


@pytest.mark.slow
def test_postgis_kill_9_while_importing_leaves_store_as_before(pg_mini, big_heads, runner, mini_files):
    """SIGKILL of the importing client while the server writes its 300,000 rows: the server rolls the
    transaction back; every table as before, and the store takes the next import."""
    import psycopg

    with open_store(pg_mini) as s:
        before = s.snapshot()
    proc = _start_import(pg_mini, big_heads)
    deadline = time.monotonic() + 120
    with psycopg.connect(pg_mini, autocommit=True) as watch:
        while not watch.execute("SELECT count(*) FROM pg_stat_activity WHERE datname = current_database() AND "
                                "(query LIKE 'COPY%%hydroatlas_stage%%' OR query LIKE 'WITH done%%') "
                                "AND state = 'active'").fetchone()[0]:
            assert proc.poll() is None, proc.stderr.read()
            assert time.monotonic() < deadline
            time.sleep(0.01)
    proc.send_signal(signal.SIGKILL)
    assert proc.wait(timeout=30) == -signal.SIGKILL
    with open_store(pg_mini) as s:
        assert s.snapshot() == before
    res = cli(runner, "import", pg_mini, "ktests", mini_files / "ktests.csv")
    assert res.exit_code == 0, res.output
