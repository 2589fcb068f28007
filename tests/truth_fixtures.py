"""Fixtures of the truth district (tests/truthdistrict.py): its files with their truth, and a store built from
them through the command line. Both are made once per test session; tests that change a store copy it first
(:func:`copy_store`)."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from hydroatlas.cli import main
from truthdistrict import Truth, make_district


def run(*args):
    """Run the CLI; ``.stdout`` holds what it printed on stdout only (notes go to stderr), ``.output`` both."""
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def ok(*args):
    """Run the CLI and require exit code 0."""
    res = run(*args)
    assert res.exit_code == 0, res.output
    return res


def build_truth_store(truth: Truth, path: Path) -> Path:
    """``hydroatlas init`` (store in the truth's length unit and CRS), then ``import`` of each kind in order."""
    runner = CliRunner()
    result = runner.invoke(main, ["init", str(path), "--crs", truth.crs, "--length-unit", truth.length_unit],
                           catch_exceptions=False)
    assert result.exit_code == 0, result.output
    for kind in truth.import_order:
        result = runner.invoke(main, ["import", str(path), kind, str(truth.files[kind])], catch_exceptions=False)
        assert result.exit_code == 0, f"import {kind}: {result.output}"
    return path


def copy_store(src: Path, dst: Path) -> Path:
    """Copy a closed GeoPackage store (and a leftover -wal/-shm file, if any) to ``dst``."""
    src, dst = Path(src), Path(dst)
    shutil.copyfile(src, dst)
    for suffix in ("-wal", "-shm"):
        side = src.with_name(src.name + suffix)
        if side.exists():
            shutil.copyfile(side, dst.with_name(dst.name + suffix))
    return dst


@pytest.fixture(scope="session")
def truth(tmp_path_factory) -> Truth:
    """The truth district's files (feet store, EPSG:3435) and their truth."""
    return make_district(tmp_path_factory.mktemp("truth_district"))


@pytest.fixture(scope="session")
def truth_store(truth, tmp_path_factory) -> Path:
    """A store built from the truth district's files through the CLI. Do not change it: copy it first."""
    return build_truth_store(truth, tmp_path_factory.mktemp("truth_store") / "truth.gpkg")
