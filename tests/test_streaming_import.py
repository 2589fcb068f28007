"""Streamed imports: a file read, checked and written in pieces gives what the whole-file path gives.

The reference is the whole-file path of this package (``import_file(..., chunk_rows=0)``: the file read
whole by pandas.read_csv and checked at once), run in the same test on a second store of the same backend.
Every test runs on both backends (the GeoPackage and PostGIS: ``store_backend`` of conftest.py).
"""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest

from hydroatlas import open_store
from hydroatlas.errors import ImportDataError
from hydroatlas.store import importers
from hydroatlas.store.importers import import_file
from hydroatlas.store.tables import iter_csv_chunks, read_csv_table

from conftest import MINI, cli, fill_mini, init_store, write_csv

CHUNK = 64  # data rows per piece: the files below span more than 3 pieces
ZONES = [tuple(r[:2]) for r in MINI["zones.csv"][1:]]


@pytest.fixture
def two_stores(store_backend, tmp_path, request, mini_files, runner):
    """Two MINI stores on the backend under test: one for the streamed import, one for the whole-file one."""
    if store_backend == "gpkg":
        locations = [tmp_path / "a.gpkg", tmp_path / "b.gpkg"]
    else:
        server = request.getfixturevalue("pg_server")
        locations = [server.new_database(), server.new_database()]
        request.addfinalizer(lambda: [server.drop_database(u) for u in locations])
    for location in locations:
        init_store(location, runner)
        fill_mini(location, mini_files, runner)
    return locations


def heads_rows(n: int) -> list[list]:
    """n readings spread over the MINI zones, one a day per zone; some rows hold a quoted line break, a
    non-ASCII note, padding, or a head given as ref_elev - depth_to_water."""
    rows = [["well_id", "zone_id", "measured_at", "head", "depth_to_water", "ref_elev", "quality", "note"]]
    for i in range(n):
        well, zone = ZONES[i % len(ZONES)]
        day = dt.date(2001, 1, 1) + dt.timedelta(days=i // len(ZONES))
        note = "line one\nline two" if i % 29 == 0 else ("Ébauche" if i % 31 == 0 else "")
        if i % 5 == 0:
            rows.append([well, zone, f"{day}T08:30:00", "", 10 + i % 7, 300.5, "good", note])
        else:
            rows.append([well, zone if i % 11 else f" {zone} ", f"{day}T08:30", 250 + (i % 13) / 4, "", "",
                         "fair", note])
    return rows


def table_rows(location, table: str) -> pd.DataFrame:
    with open_store(location) as store:
        return store.read(table, include_retired=True).drop(columns=["fid"], errors="ignore")


def snapshot(location):
    with open_store(location) as store:
        return store.snapshot()


def test_file_spans_more_than_three_pieces(tmp_path):
    path = write_csv(tmp_path / "heads.csv", heads_rows(500))
    pieces = list(iter_csv_chunks(path, required=("well_id",), chunk_rows=CHUNK))
    assert len(pieces) > 3
    whole = read_csv_table(path, required=("well_id",))  # the reference: one pandas.read_csv of the file
    joined = pd.concat(pieces, ignore_index=True)
    pd.testing.assert_frame_equal(joined, whole)
    assert joined["source_row"].tolist() == list(range(1, 501))
    assert joined.loc[0, "note"] == "line one\nline two"  # a quoted line break at a piece's end stays whole


@pytest.mark.parametrize("kind", ["heads", "ktests"])
def test_streamed_import_equals_whole_file(two_stores, tmp_path, kind):
    streamed, whole = two_stores
    if kind == "heads":
        rows = heads_rows(500)
    else:
        rows = [["well_id", "zone_id", "tested_on", "method", "k", "k_unit", "quality", "source", "lab"]]
        for i in range(300):
            well, zone = ZONES[i % len(ZONES)]
            day = dt.date(2010, 1, 1) + dt.timedelta(days=i)
            rows.append([well, zone, str(day), "slug", 1 + i % 9, "m/d", "good", "t", "L" + str(i % 3)])
    path = write_csv(tmp_path / f"{kind}.csv", rows)
    got = import_file(open_store(streamed), kind, path, chunk_rows=CHUNK)
    ref = import_file(open_store(whole), kind, path, chunk_rows=0)
    assert (got.rows, got.inserted, got.updated) == (ref.rows, ref.inserted, ref.updated)
    pd.testing.assert_frame_equal(table_rows(streamed, kind), table_rows(whole, kind))
    # a re-import that changes every tenth value updates the same rows, with the same history, both ways
    changed = [list(r) for r in rows]
    col = changed[0].index("head" if kind == "heads" else "k")
    for r in changed[1::10]:
        r[col] = 99 if r[col] != "" else r[col]
    path2 = write_csv(tmp_path / f"{kind}2.csv", changed)
    got = import_file(open_store(streamed), kind, path2, chunk_rows=CHUNK)
    ref = import_file(open_store(whole), kind, path2, chunk_rows=0)
    assert got.updated == ref.updated > 0
    pd.testing.assert_frame_equal(table_rows(streamed, kind), table_rows(whole, kind))
    for location in (streamed, whole):
        with open_store(location) as store:
            assert store.count("record_history") == got.updated


def _refusal(location, path, **kw) -> ImportDataError:
    with open_store(location) as store, pytest.raises(ImportDataError) as err:
        import_file(store, "heads", path, **kw)
    return err.value


def test_bad_cell_in_last_piece(two_stores, tmp_path):
    streamed, whole = two_stores
    rows = heads_rows(500)
    rows[-1][3] = "2x5"  # head of data row 500: the last piece
    path = write_csv(tmp_path / "heads.csv", rows)
    before = snapshot(streamed)
    err = _refusal(streamed, path, chunk_rows=CHUNK)
    assert (err.row, err.column) == (500, "head")
    assert str(err) == str(_refusal(whole, path, chunk_rows=0))
    assert "\n" not in str(err)
    assert snapshot(streamed) == before  # every piece written before the refusal was rolled back


def test_duplicate_key_split_across_pieces(two_stores, tmp_path):
    streamed, whole = two_stores
    rows = heads_rows(500)
    rows[450] = list(rows[3])  # data row 450 repeats data row 3 (different pieces)
    rows[450][3], rows[450][4], rows[450][5] = 251, "", ""
    path = write_csv(tmp_path / "heads.csv", rows)
    before = snapshot(streamed)
    err = _refusal(streamed, path, chunk_rows=CHUNK)
    assert (err.row, err.column) == (450, "measured_at")
    assert "it already appears in row 3" in str(err)
    assert str(err) == str(_refusal(whole, path, chunk_rows=0))
    assert snapshot(streamed) == before


@pytest.mark.parametrize("damage, row", [
    (lambda rows: rows[480].append("extra"), 480),  # more fields than the header
    # a NUL byte in data row 470; the reader counts this row by file lines (line 488 - 1), as the whole-file
    # reader does: the 17 quoted line breaks of rows 1, 30, ..., 465 come before it
    (lambda rows: rows[470].__setitem__(0, "W\x001"), 487),
])
def test_damaged_row_in_a_later_piece(two_stores, tmp_path, damage, row):
    streamed, whole = two_stores
    rows = heads_rows(500)
    damage(rows)
    path = write_csv(tmp_path / "heads.csv", rows)
    before = snapshot(streamed)
    err = _refusal(streamed, path, chunk_rows=CHUNK)
    assert err.row == row
    assert str(err) == str(_refusal(whole, path, chunk_rows=0))
    assert snapshot(streamed) == before


def test_cli_import_streams(two_stores, tmp_path, runner, monkeypatch):
    """The CLI's import streams (pieces made small here): a bad row in the last piece exits 2, one line."""
    streamed, _ = two_stores
    monkeypatch.setattr(importers, "CHUNK_ROWS", CHUNK)
    pieces = []

    def counting(*args, **kw):
        for piece in iter_csv_chunks(*args, **kw):
            pieces.append(len(piece))
            yield piece

    monkeypatch.setattr(importers, "iter_csv_chunks", counting)
    rows = heads_rows(500)
    rows[-1][1] = "NOPE"
    path = write_csv(tmp_path / "big_heads.csv", rows)
    before = snapshot(streamed)
    res = cli(runner, "import", streamed, "heads", path)
    assert res.exit_code == 2, res.output
    message = res.output.strip()
    assert "\n" not in message and "row 500" in message and "zone_id" in message
    assert snapshot(streamed) == before
    rows[-1][1] = ZONES[499 % len(ZONES)][1]
    write_csv(path, rows)
    res = cli(runner, "import", streamed, "heads", path)
    assert res.exit_code == 0, res.output
    assert table_rows(streamed, "heads")["source_file"].eq("big_heads.csv").sum() == 500
    # two runs over the file, each in pieces of at most CHUNK lines (fewer rows where a value spans lines)
    assert sum(pieces) == 1000 and max(pieces) <= CHUNK and len(pieces) >= 2 * 8
