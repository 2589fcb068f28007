"""Output file names built from codes, and all-or-nothing writes (hydroatlas.export.names).

The codes are invented hostile inputs; the plain-name expectations come from SPEC section 5
(``OUT/<unit>_<quantity>.tif``).
"""

from __future__ import annotations

import errno
import os
import random
import re
import sqlite3
from pathlib import Path

import pytest

from hydroatlas.errors import ParameterError, StoreError
from hydroatlas.export import names
from hydroatlas.export.names import atomic_path, ensure_folder, file_stem, output_path, unit_path

from conftest import cli

HOSTILE = ["../../x", "..", ".", "/abs/path", "a/b", "a/../..", "C:\\x", "C:x", "..\\..\\x", "", " ", "\t",
           "x\0y", "\n", "Ünïcødé", "水文", "e\u0301", "CON", "nul.txt", "a.", ".hidden", "-", "x" * 300,
           "~/x", "$HOME", "a:b", "a*b?", "<img src=x>", "A-0123456789ab"]
STEM = re.compile(r"^[A-Za-z0-9_-][A-Za-z0-9._-]*$")


def _files(root: Path) -> set[Path]:
    return {p for p in root.rglob("*") if p.is_file()}


# ---------------------------------------------------------------- file_stem / output_path

@pytest.mark.parametrize("code", ["ULS", "AQ", "U-1.a_b", "shale2"])
def test_plain_codes_keep_the_spec_names(tmp_path, code):
    assert file_stem(code) == code
    assert unit_path(tmp_path, code, "head.tif") == tmp_path / f"{code}_head.tif"
    assert unit_path("out", "ULS", "pathways.csv") == Path("out") / "ULS_pathways.csv"


@pytest.mark.parametrize("code", HOSTILE)
def test_hostile_codes_stay_in_the_folder(tmp_path, code):
    folder = tmp_path / "out"
    folder.mkdir()
    stem = file_stem(code)
    assert STEM.match(stem) and not stem.endswith(".") and 0 < len(stem) <= names.MAX_STEM, stem
    path = unit_path(folder, code, "head.tif")
    assert path.parent == folder and path.resolve().parent == folder.resolve()
    path.write_bytes(b"x")
    assert _files(tmp_path) == {folder / path.name}


def test_changed_codes_carry_a_hash_and_never_collide():
    codes = list(HOSTILE) + ["a_b", "a\\b", "a b", "a:b", "a/b", "A/B", "../x", "..\\x", "__x", "_.x",
                             "x" * 300 + "1", "x" * 300 + "2", file_stem("a/b"), file_stem(file_stem("a/b"))]
    rng = random.Random(11)
    alphabet = "ab./\\_-: \0ü"
    codes += ["".join(rng.choice(alphabet) for _ in range(rng.randint(0, 6))) for _ in range(4000)]
    codes = list(dict.fromkeys(codes))
    stems = [file_stem(c) for c in codes]
    assert len(set(stems)) == len(codes)
    assert file_stem("a/b") != "a_b" and file_stem("a/b").startswith("a_b-")


@pytest.mark.parametrize("name", ["", ".", "..", "a/b", "../x", "/abs", "C:\\x", "C:x", "x\0", "a\\b"])
def test_output_path_refuses_names_that_leave_the_folder(tmp_path, name):
    with pytest.raises(ParameterError, match="would leave the output folder") as info:
        output_path(tmp_path, name)
    assert str(tmp_path) in str(info.value) and isinstance(info.value, ValueError)


# ---------------------------------------------------------------- atomic writes

def test_atomic_path_leaves_no_partial_file_and_keeps_the_old_one(tmp_path):
    target = tmp_path / "ULS_head.json"
    target.write_text("old")
    with pytest.raises(RuntimeError, match="writer broke"):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            assert tmp.parent == tmp_path and tmp.suffix == ".json" and tmp.name.startswith(".")
            raise RuntimeError("writer broke")
    assert target.read_text() == "old" and _files(tmp_path) == {target}
    with atomic_path(target) as tmp:
        tmp.write_text("new")
    assert target.read_text() == "new" and _files(tmp_path) == {target}


def test_a_full_disk_becomes_a_clear_error(tmp_path, monkeypatch):
    def full(src, dst):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "replace", full)
    with pytest.raises(StoreError, match=f"cannot write a.csv in the output folder {tmp_path}: the disk is full"):
        names.write_text(tmp_path / "a.csv", "x,y\n")
    assert _files(tmp_path) == set()


def test_an_output_folder_that_is_a_file(tmp_path):
    (tmp_path / "out").write_text("")
    with pytest.raises(StoreError, match=f"the output folder {tmp_path / 'out'} is a file"):
        ensure_folder(tmp_path / "out")
    with pytest.raises(StoreError, match="is a file"):
        names.write_text(tmp_path / "out" / "a.txt", "x")


# ---------------------------------------------------------------- end to end through the command line

def _rename_unit(store: Path, old: str, new: str) -> None:
    """Force a unit code past import validation: rewrite it in units and in every table that refers to it."""
    with sqlite3.connect(store) as conn:
        conn.execute("PRAGMA foreign_keys = OFF")
        tables = [r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
        for table in tables:
            cols = {r[1] for r in conn.execute(f'PRAGMA table_info("{table}")')}
            for col in ("unit", "parent") if table != "units" else ("code", "parent"):
                # only where rows match: GeoPackage geometry triggers need SpatiaLite functions to compile
                if col in cols and conn.execute(f'SELECT count(*) FROM "{table}" WHERE "{col}" = ?',
                                                (old,)).fetchone()[0]:
                    conn.execute(f'UPDATE "{table}" SET "{col}" = ? WHERE "{col}" = ?', (new, old))
    conn.close()


@pytest.mark.parametrize("code", ["../../x", "ABS", "a/b", ".."])
def test_hostile_unit_code_writes_only_inside_out(mini_store, tmp_path, runner, code):
    if code == "ABS":
        code = str(tmp_path / "abs" / "x")  # an absolute path, inside tmp_path so that a leak is seen
    _rename_unit(mini_store, "TOP", code)
    out = tmp_path / "deep" / "er" / "out"
    before = _files(tmp_path)
    res = cli(runner, "surface", mini_store, "--unit", code, "--quantity", "head", "--method", "idw", "--cell", 100,
              "--out", out)
    assert res.exit_code == 0, res.output
    new = _files(tmp_path) - before
    assert new and all(p.parent == out for p in new), sorted(map(str, new))  # in OUT itself, no sub-folder
    res = cli(runner, "drawdown", mini_store, "--unit", code, "--days", 10, "-S", 1e-3, "-T", 100,
              "--new-well", "611000,4100000,50", "--out", out)
    assert res.exit_code == 0, res.output
    res = cli(runner, "map", mini_store, "--unit", code, "--surfaces", out, "--out", out / "map.html")
    assert res.exit_code == 0, res.output
    new = _files(tmp_path) - before
    assert all(p.parent == out for p in new), sorted(map(str, new))
    stem = file_stem(code)
    assert {f"{stem}_head.tif", f"{stem}_head.json", f"{stem}_drawdown.tif", "map.html"} <= {p.name for p in new}
    assert not any(p.name.startswith(".") for p in new)  # no temporary file left behind
    # the map found the surfaces again under the same names: contours and drawdown layers are on it
    page = (out / "map.html").read_text()
    assert "Head contours of" in page and "(unnamed): drawdown change" in page  # found in the store's registry


def test_no_partial_output_when_the_disk_is_full(mini_store, tmp_path, runner, monkeypatch):
    out = tmp_path / "out"
    real = os.replace
    calls = []

    def full(src, dst):
        calls.append(dst)
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "replace", full)
    res = cli(runner, "surface", mini_store, "--unit", "TOP", "--quantity", "head", "--method", "idw", "--cell", 100,
              "--out", out)
    monkeypatch.setattr(os, "replace", real)
    assert calls, "the writer did not go through os.replace"
    assert res.exit_code == 2, res.output
    assert f"cannot write TOP_head.tif in the output folder {out}: the disk is full" in res.output
    assert "Traceback" not in res.output
    assert _files(tmp_path / "out") == set()
