"""Command-line behaviour: help, exit codes, the installed console script."""

import subprocess
import sys
from pathlib import Path

import pytest

from hydroatlas import workflows

from conftest import cli


@pytest.mark.parametrize("command", ["init", "import", "check", "stats", "demo"])
def test_help(runner, command):
    res = cli(runner, command, "--help")
    assert res.exit_code == 0 and "Usage:" in res.output


def test_usage_error_exit_2(runner, tmp_path):
    res = cli(runner, "import", tmp_path / "s.gpkg", "lizards", tmp_path / "f.csv")
    assert res.exit_code == 2
    res = cli(runner, "init", tmp_path / "s.gpkg")  # --crs missing
    assert res.exit_code == 2 and "--crs" in res.output


def test_internal_error_exit_1(runner, mini_store, monkeypatch):
    def boom(*a, **k):
        raise RuntimeError("unexpected")

    monkeypatch.setattr(workflows, "unit_stats", boom)
    res = runner.invoke(__import__("hydroatlas.cli", fromlist=["main"]).main, ["stats", str(mini_store)])
    assert res.exit_code == 1 and "internal error" in res.output


def test_console_script_runs(tmp_path):
    exe = Path(sys.executable).parent / "hydroatlas"
    assert exe.exists(), "the console script is installed with the package"
    out = subprocess.run([str(exe), "init", str(tmp_path / "c.gpkg"), "--crs", "EPSG:32616"],
                         capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    bad = subprocess.run([str(exe), "stats", str(tmp_path / "nope.gpkg")], capture_output=True, text=True)
    assert bad.returncode == 2 and "does not exist" in bad.stderr and bad.stdout == ""
