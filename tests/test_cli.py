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


# -- conventions of the main group: -q/--quiet, -v/--verbose; check --format -------------------------------------
NOTE = "note: 1 K test in 1 well left out by the selection: 1 quality poor; --include-poor brings them back\n"


def test_quiet_silences_notes_and_verbose_adds_detail(runner, mini_store):
    """The poor K test of the mini district (W2/S2) is left out by default: a note; -q drops it, -v names it."""
    plain = cli(runner, "stats", mini_store)
    quiet = cli(runner, "-q", "stats", mini_store)
    loud = cli(runner, "--verbose", "stats", mini_store)
    assert plain.exit_code == quiet.exit_code == loud.exit_code == 0
    assert plain.stderr == NOTE
    assert quiet.stderr == ""
    assert loud.stderr == NOTE + "detail: ktests left out at well W2 zone S2: quality poor (1)\n"
    assert plain.stdout == quiet.stdout == loud.stdout and "TOP" in plain.stdout  # results never change


def test_quiet_keeps_warnings(capsys):
    """Warnings are cautions, not notes: under -q a selection's note goes, its warning stays."""
    import click

    from hydroatlas.cli import _common as cli_module

    left_out = [{"what": "heads", "well_id": "W1", "zone_id": "P1", "reason": "quality poor", "count": 2},
                {"what": "heads", "well_id": "W2", "zone_id": "S1", "reason": "no reading within 31 days of 2024-01-01",
                 "count": 1}]
    for verbosity in (0, -1):
        with click.Context(cli_module.main, obj={"verbosity": verbosity}):
            cli_module._say_selection({"left_out": left_out})
        err = capsys.readouterr().err
        assert ("note: 2 head readings in 1 well left out" in err) is (verbosity == 0), err
        assert "warning: 1 zone left out: no reading within 31 days of 2024-01-01" in err


def test_quiet_and_verbose_together_are_refused(runner, mini_store):
    res = cli(runner, "-q", "-v", "stats", mini_store)
    assert res.exit_code == 2
    assert res.output == "hydroatlas: error: -q/--quiet and -v/--verbose exclude each other: give one\n"


def test_quiet_turns_the_progress_bar_off_even_on_a_terminal(monkeypatch):
    import click

    from hydroatlas.cli import _common as cli_module

    class Terminal:
        def isatty(self):
            return True

        def write(self, text):
            return len(text)

        def flush(self):
            pass

    monkeypatch.setattr(cli_module.sys, "stderr", Terminal())
    for verbosity, disabled in ((0, False), (-1, True), (1, False)):
        with click.Context(cli_module.main, obj={"verbosity": verbosity}):
            bar = cli_module._progress("rows")
            assert bar.disable is disabled, verbosity
            bar.close()


def test_check_format_json_csv_table_and_the_old_json_flag(runner, mini_store):
    import csv
    import io
    import json

    as_json = cli(runner, "check", mini_store, "--format", "json")
    old = cli(runner, "check", mini_store, "--json")
    assert as_json.exit_code == old.exit_code == 0
    findings = json.loads(as_json.stdout)
    assert old.stdout == as_json.stdout and findings
    # the mini district's straddling zone W2/S2 (35-51 m deep across TOP/MID at 45 m)
    assert any(f["kind"] == "straddle" and (f["well_id"], f["zone_id"]) == ("W2", "S2") for f in findings)
    as_csv = cli(runner, "check", mini_store, "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(as_csv.stdout)))
    assert [(r["kind"], r["well_id"], r["zone_id"]) for r in rows] == [
        (f["kind"], f["well_id"], f["zone_id"] or "") for f in findings]
    table = cli(runner, "check", mini_store)
    assert table.exit_code == 0 and "straddle" in table.stdout and table.stdout.rstrip().endswith(
        ", ".join(f"{k}: {n}" for k, n in __import__("collections").Counter(f["kind"] for f in findings).items()))
    both = cli(runner, "check", mini_store, "--json", "--format", "csv")
    assert both.exit_code == 2
    assert both.output == "hydroatlas: error: --json is the same as --format json; it cannot go with --format csv\n"
