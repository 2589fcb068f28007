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


@pytest.mark.parametrize("command", ["verticals", "surface", "threepoint", "paths", "drawdown", "grid"])
def test_help_of_commands_with_checked_options(runner, command):
    res = cli(runner, command, "--help")
    assert res.exit_code == 0 and "Usage:" in res.output


def test_grid_help_names_the_pair_formats(runner):
    res = cli(runner, "grid", "--help")
    assert "--origin X,Y" in res.output and "--shape ROWS,COLS" in res.output and "--cell FLOAT" in res.output


def test_bad_option_value_is_one_line_without_usage(runner, mini_store):
    res = cli(runner, "surface", mini_store, "--unit", "TOP", "--cell", "-1")
    assert res.exit_code == 2
    assert res.output == "hydroatlas: error: --cell must be > 0 and finite (got -1)\n"
    res = cli(runner, "--debug", "drawdown", mini_store, "--unit", "TOP", "--days", "1", "--rate", "W1=inf")
    assert res.exit_code == 2
    assert res.output == "hydroatlas: error: --rate must be WELL=Q with Q a finite number (got W1=inf)\n"
    res = cli(runner, "surface", mini_store)  # click's own usage errors keep their usage hint
    assert res.exit_code == 2 and "Usage:" in res.output and "--unit" in res.output
