"""The product registry (hydroatlas.products): derived products recorded in the store, found by later commands,
refused when the store rows they were made from changed since.

These are contract tests; what they check against the outside world:
- the exit codes and one-line errors of SPEC section 3 (2 for bad input, the store unchanged);
- the registry is a GeoPackage attribute table (OGC GeoPackage 1.4, clause 2.4: registered in ``gpkg_contents``
  with data_type 'attributes'), read back through GDAL with pyogrio;
- the table digests rest on SQLite's AUTOINCREMENT rule that a rowid is never reused
  (https://sqlite.org/autoinc.html) and on the store's history triggers; the tests change rows every way an
  import, ``retire``/``restore`` and a raw SQLite writer can, and watch the digest.
"""

from __future__ import annotations

import json
import shlex
import sqlite3
import time
from pathlib import Path

import pandas as pd
import pyogrio
import pytest

from hydroatlas import open_store, products
from hydroatlas.errors import ParameterError, StaleProductError
from hydroatlas.store import gpkg_sql
from hydroatlas.store.schema import SCHEMA_VERSION, TABLES

from conftest import MINI, cli, write_csv
from truth_fixtures import copy_store

ROOT = Path(__file__).resolve().parents[1]


def _ok(runner, *args):
    res = cli(runner, *args)
    assert res.exit_code == 0, res.output
    return res


def _surface(runner, store, out, unit="TOP", *more):
    return _ok(runner, "surface", store, "--unit", unit, "--quantity", "head", "--method", "idw", "--cell", 100,
               "--out", out, *more)


def _products_json(runner, store, *more) -> list[dict]:
    res = _ok(runner, "products", store, "--format", "json", *more)
    return json.loads(res.stdout)


# -- the library ------------------------------------------------------------------------------------------------
def test_record_find_latest_and_names(mini_store, tmp_path):
    """Two surfaces of one unit in two folders get two names; the latest wins unless one is named or a folder
    narrows the search; remaking a product onto its own files keeps its name and makes it the latest."""
    a, b = tmp_path / "a", tmp_path / "b"
    for folder in (a, b):
        folder.mkdir()
        (folder / "TOP_head.tif").write_text("raster")
    with open_store(mini_store) as s:
        digests = products.input_digests(s, "surface", "head")
        made = []
        for folder in (a, b):
            name = products.product_name(s, "TOP_head", folder / "TOP_head.tif")
            made.append(products.record_product(
                s, kind="surface", name=name, unit="TOP", quantity="head", value_unit="m",
                files=[folder / "TOP_head.tif"], command=f"hydroatlas surface {s.location} --out {folder}",
                digests=digests, selection={"policy": {"include_poor": False}, "left_out": [{"a": 1}, {"b": 2}]}))
            time.sleep(0.002)  # created_utc has millisecond resolution
        assert [p.name for p in made] == ["TOP_head", "TOP_head_2"]
        assert made[0].selection == {"policy": {"include_poor": False}, "n_left_out": 2}
        assert made[0].code_version and made[0].input_digests == digests and made[0].files[0] == str(a / "TOP_head.tif")
        assert products.find_product(s, kind="surface", unit="TOP", quantity="head").name == "TOP_head_2"
        assert products.find_product(s, kind="surface", unit="TOP", quantity="head", name="TOP_head").name == "TOP_head"
        assert products.find_product(s, kind="surface", unit="TOP", quantity="head", folder=a).name == "TOP_head"
        # remade in folder a: same name, now the latest
        assert products.product_name(s, "TOP_head", a / "TOP_head.tif") == "TOP_head"
        products.record_product(s, kind="surface", name="TOP_head", unit="TOP", quantity="head",
                                files=[a / "TOP_head.tif"], command="x", digests=digests)
        assert products.find_product(s, kind="surface", unit="TOP", quantity="head").name == "TOP_head"
        assert len(products.list_products(s)) == 2
        with pytest.raises(ParameterError, match="no product 'nope'.*TOP_head_2, TOP_head "):
            products.find_product(s, kind="surface", unit="TOP", quantity="head", name="nope")
        with pytest.raises(ParameterError, match="is not a logk surface"):
            products.find_product(s, kind="surface", unit="TOP", quantity="logk", name="TOP_head")
        with pytest.raises(ParameterError, match="no head surface of unit LOW is recorded.*"
                                                 "hydroatlas surface .* --unit LOW --quantity head"):
            products.find_product(s, kind="surface", unit="LOW", quantity="head")
        assert products.find_product(s, kind="drawdown", unit="TOP", required=False) is None
        with pytest.raises(ParameterError, match="no input tables are declared for products of kind 'hydrograph'"):
            products.record_product(s, kind="hydrograph", name="h", files=[a / "TOP_head.tif"], command="x")
        # a kind added later records with the tables it names
        later = products.record_product(s, kind="hydrograph", name="h", files=[a / "TOP_head.tif"], command="x",
                                        tables=("heads",))
        assert list(later.input_digests) == ["heads"]
    # the registry is a GeoPackage attribute table: GDAL reads it
    rows = pyogrio.read_dataframe(mini_store, layer="products")
    assert sorted(rows["name"]) == ["TOP_head", "TOP_head_2", "h"]
    assert json.loads(rows.set_index("name").loc["TOP_head_2", "files"]) == [str(b / "TOP_head.tif")]


def test_digests_change_with_every_kind_of_change(mini_store, mini_files, runner):
    """Insert, update, retire, restore and a raw delete each change the digest of their table and of no other;
    an import that changes nothing changes nothing."""
    def digests():
        with open_store(mini_store) as s:
            return products.table_digests(s, ["heads", "units", "ktests"])

    seen = [digests()]
    _ok(runner, "import", mini_store, "heads", mini_files / "heads.csv")  # unchanged file: nothing written
    assert digests() == seen[-1]
    rows = [list(r) for r in MINI["heads.csv"]]
    rows[1][3] = 291.0  # W1/P1 at 2024-06-01T10:00:00 was 290.0
    res = _ok(runner, "import", mini_store, "heads", write_csv(mini_files / "heads_edit.csv", rows))
    assert "1 updated" in res.output
    steps = [digests()]
    _ok(runner, "retire", mini_store, "heads", "W1/P1/2024-06-01T10:00:00", "--reason", "test")
    steps.append(digests())
    _ok(runner, "restore", mini_store, "heads", "W1/P1/2024-06-01T10:00:00")
    steps.append(digests())
    _ok(runner, "import", mini_store, "heads", write_csv(mini_files / "heads_new.csv", [
        rows[0], ["W1", "P1", "2024-07-01T10:00:00", 289.0, "", "", "good"]]))
    steps.append(digests())
    conn = sqlite3.connect(mini_store)
    conn.execute("DELETE FROM heads WHERE measured_at = '2024-07-01T10:00:00'")
    conn.commit()
    conn.close()
    steps.append(digests())
    heads = [seen[0]["heads"]] + [d["heads"] for d in steps]
    assert len(set(heads)) == len(heads), heads  # every step is a change, the restore included
    assert all(d["units"] == seen[0]["units"] and d["ktests"] == seen[0]["ktests"] for d in steps)


def test_check_fresh_names_the_tables_and_the_command(mini_store, mini_files, runner, tmp_path):
    with open_store(mini_store) as s:
        (tmp_path / "f.tif").write_text("x")
        prod = products.record_product(s, kind="surface", name="TOP_head", unit="TOP", quantity="head",
                                       files=[tmp_path / "f.tif"], command="hydroatlas surface S --unit TOP")
        assert products.check_fresh(s, prod) == [] and products.changed_tables(s, prod) == []
    _ok(runner, "import", mini_store, "picks", write_csv(mini_files / "p.csv", [
        MINI["picks.csv"][0], ["W1", "TOP", 0, 41]]))
    with open_store(mini_store) as s:
        with pytest.raises(StaleProductError) as info:
            products.check_fresh(s, prod)
        err = info.value
        assert isinstance(err, ParameterError) and isinstance(err, ValueError) and err.products == ("TOP_head",)
        assert "TOP_head (head surface of unit TOP)" in str(err) and "rows of picks that changed" in str(err)
        assert "remake it with 'hydroatlas surface S --unit TOP'" in str(err) and "\n" not in str(err)
        assert err.params == ("allow_stale",)
        [text] = products.check_fresh(s, prod, allow_stale=True)
        assert "picks" in text and "used as it is" in text


# -- the case through the command line, on the truth district (a feet store) ----------------------------
def test_edited_head_reading_makes_paths_refuse_the_stale_surface(truth, truth_store, tmp_path, runner):
    """Make a head surface and pathways; edit one head reading by re-importing it; `paths` refuses the stale
    surface (exit 2, naming it, the changed table and the command that remakes it) and writes nothing; with
    --allow-stale it runs and says so on stderr and in its sidecar; after running the recorded command that
    remakes the surface, `paths` runs clean. `products --format json` follows along."""
    store = copy_store(truth_store, tmp_path / "district.gpkg")
    surf, out = tmp_path / "surf", tmp_path / "paths"
    _ok(runner, "surface", store, "--unit", "UD", "--method", "idw", "--window", truth.normal_window,
        "--cell", 1000, "--out", surf)
    args = ["paths", store, "--unit", "UD", "--porosity", 0.05, "--capture-radius", "300ft", "--out", out]
    res = _ok(runner, *args)
    assert "product: UD_pathways" in res.stdout
    listed = {p["name"]: p for p in _products_json(runner, store)}
    assert {"UD_head", "UD_gradient", "UD_pathways"} <= set(listed)
    assert not any(p["stale"] for p in listed.values())
    assert listed["UD_pathways"]["inputs"] == ["UD_head"] and listed["UD_gradient"]["inputs"] == ["UD_head"]
    assert listed["UD_head"]["head_window"]["window"] == truth.normal_window
    assert listed["UD_head"]["value_unit"] == "ft" and listed["UD_head"]["files"][0] == str(surf / "UD_head.tif")
    # one head reading of a UD zone inside the window, re-imported with another value
    heads = pd.read_csv(truth.files["heads"])
    ud = {z for z in truth.monitored_zones["UD"]}
    in_ud = pd.Series([(w, z) in ud for w, z in zip(heads["well_id"], heads["zone_id"])], index=heads.index)
    inside = heads[in_ud & heads["measured_at"].between(*truth.normal_window.split("/"))
                   & heads["head"].notna()]
    edit = inside.iloc[[0]].copy()
    edit["head"] += 1.0
    edit.to_csv(tmp_path / "edit.csv", index=False)
    res = _ok(runner, "import", store, "heads", tmp_path / "edit.csv")
    assert "1 updated" in res.output
    with open_store(store) as s:
        before = s.snapshot()
    side_before = (out / "UD_pathways.json").read_text()
    res = cli(runner, *args)
    assert res.exit_code == 2 and res.stderr.count("\n") == 1, res.output
    msg = res.stderr
    assert "UD_head (head surface of unit UD)" in msg and "rows of heads that changed" in msg
    remake = listed["UD_head"]["command"]
    assert f"remake it with '{remake}'" in msg and "--allow-stale" in msg and "internal error" not in msg
    with open_store(store) as s:
        assert s.snapshot() == before  # refused: nothing recorded
    assert (out / "UD_pathways.json").read_text() == side_before  # and nothing written
    stale = {p["name"]: p for p in _products_json(runner, store, "--unit", "UD")}
    assert stale["UD_head"]["stale"] and stale["UD_head"]["changed_tables"] == ["heads"]
    assert stale["UD_pathways"]["stale"] and "heads" in stale["UD_pathways"]["changed_tables"]
    # --allow-stale: it runs, and says so
    res = _ok(runner, *args, "--allow-stale")
    assert "warning: product UD_head" in res.stderr and "(--allow-stale)" in res.stderr
    side = json.loads((out / "UD_pathways.json").read_text())
    assert len(side["stale_inputs_used"]) == 1 and "UD_head" in side["stale_inputs_used"][0]
    assert side["input_products"] == ["UD_head"]
    # the recorded command remakes the surface; then paths runs clean
    argv = shlex.split(remake)
    assert argv[:2] == ["hydroatlas", "surface"]
    _ok(runner, *argv[1:])
    res = _ok(runner, *args)
    assert "warning: product" not in res.stderr
    assert json.loads((out / "UD_pathways.json").read_text())["stale_inputs_used"] == []
    fresh = {p["name"]: p for p in _products_json(runner, store, "--kind", "surface")}
    assert set(fresh) == {"UD_head"} and not fresh["UD_head"]["stale"]


# -- drawdown scenarios, the map, the folder option ----------------------------------------------------------
def test_drawdown_records_its_head_surface_and_the_map_picks_a_named_scenario(mini_store, tmp_path, runner):
    out = tmp_path / "out"
    _surface(runner, mini_store, out)
    for name, q in (("planA", 50), ("planB", 80)):
        res = _ok(runner, "drawdown", mini_store, "--unit", "TOP", "--days", 10, "-S", 1e-3, "-T", 100,
                  "--new-well", f"P{name[-1]},611000,4100000,{q}", "--name", name, "--out", out)
        assert f"product: TOP_drawdown_{name} (recorded in the store, on head surface TOP_head)" in res.stdout
    unnamed = _ok(runner, "drawdown", mini_store, "--unit", "TOP", "--days", 10, "-S", 1e-3, "-T", 100,
                  "--new-well", "611000,4100000,80", "--out", out)
    assert "product: TOP_drawdown " in unnamed.stdout  # the generated name of an unnamed scenario
    side = json.loads((out / "TOP_drawdown_planA.json").read_text())
    assert side["baseline"]["head_surface_product"] == "TOP_head"
    assert side["baseline"]["head_surface"] == str(out / "TOP_head.tif")
    assert side["input_products"] == ["TOP_head"] and side["product"] == "TOP_drawdown_planA"
    listed = {p["name"]: p for p in _products_json(runner, mini_store, "--kind", "drawdown")}
    assert set(listed) == {"TOP_drawdown_planA", "TOP_drawdown_planB", "TOP_drawdown"}
    assert listed["TOP_drawdown_planA"]["parameters"]["scenario"] == "planA"
    assert listed["TOP_drawdown"]["inputs"] == ["TOP_head"] and listed["TOP_drawdown"]["value_unit"] == "m"
    _ok(runner, "map", mini_store, "--unit", "TOP", "--scenario", "planB", "--out", out / "b.html")
    page = (out / "b.html").read_text(encoding="utf-8")
    assert "Scenario planB: drawdown change" in page and "Scenario planA" not in page
    assert "(unnamed)" not in page
    _ok(runner, "map", mini_store, "--unit", "TOP", "--out", out / "all.html")  # default: every scenario
    page = (out / "all.html").read_text(encoding="utf-8")
    assert "Scenario planA: drawdown change" in page and "Scenario planB: drawdown change" in page
    assert "Scenario TOP_drawdown (unnamed): drawdown change" in page
    res = cli(runner, "map", mini_store, "--unit", "TOP", "--scenario", "planC", "--out", out / "c.html")
    assert res.exit_code == 2 and "no drawdown scenario 'planC'" in res.stderr and "planA" in res.stderr
    maps = {p["name"]: p for p in _products_json(runner, mini_store, "--kind", "map")}
    assert maps["map_TOP"]["inputs"][0] == "TOP_head" or "TOP_head" in maps["map_TOP"]["inputs"]


def test_layers_figures_and_map_refuse_a_stale_surface_unless_allowed(mini_store, mini_files, tmp_path, runner):
    out = tmp_path / "out"
    _surface(runner, mini_store, out)
    rows = [list(r) for r in MINI["heads.csv"]]
    rows[4][4] = 13.0  # W2/S1: depth to water 12.5 -> 13.0
    assert "1 updated" in _ok(runner, "import", mini_store, "heads", write_csv(tmp_path / "h.csv", rows)).output
    for args in (("layers", mini_store, "--out", out), ("figures", mini_store, "--out", tmp_path / "fig"),
                 ("map", mini_store, "--unit", "TOP", "--out", out / "m.html")):
        res = cli(runner, *args)
        assert res.exit_code == 2 and "TOP_head (head surface of unit TOP)" in res.stderr, (args, res.output)
        assert "rows of heads" in res.stderr and "--allow-stale" in res.stderr
        res = _ok(runner, *args, "--allow-stale")
        assert "warning: product TOP_head" in res.stderr, args
    assert "Stale input: product TOP_head" in (out / "m.html").read_text(encoding="utf-8")
    listed = {p["name"]: p for p in _products_json(runner, mini_store)}
    assert listed["layers"]["inputs"] == ["TOP_head", "TOP_gradient"] and not listed["layers"]["stale"]
    assert listed["figures"]["inputs"] == ["TOP_head"] and listed["map_TOP"]["kind"] == "map"


def test_surface_name_and_surfaces_folder_choose_the_head_surface(mini_store, tmp_path, runner):
    a, b = tmp_path / "a", tmp_path / "b"
    _surface(runner, mini_store, a)
    res = _surface(runner, mini_store, b)
    assert "product: TOP_head_2, TOP_gradient_2" in res.stdout

    def used(*more):
        out = tmp_path / "dd"
        _ok(runner, "drawdown", mini_store, "--unit", "TOP", "--days", 10, "-S", 1e-3, "-T", 100,
            "--new-well", "611000,4100000,50", "--out", out, *more)
        return json.loads((out / "TOP_drawdown.json").read_text())["baseline"]["head_surface_product"]

    assert used() == "TOP_head_2"  # the latest
    assert used("--surface", "TOP_head") == "TOP_head"
    assert used("--surfaces", a) == "TOP_head"
    res = cli(runner, "drawdown", mini_store, "--unit", "TOP", "--days", 10, "-S", 1e-3, "-T", 100, "--new-well",
              "611000,4100000,50", "--surfaces", tmp_path / "elsewhere", "--out", tmp_path / "dd")
    assert res.exit_code == 2 and "no head surface of unit TOP is recorded" in res.stderr
    assert "with its files in" in res.stderr
    res = cli(runner, "drawdown", mini_store, "--unit", "TOP", "--days", 10, "-S", 1e-3, "-T", 100, "--new-well",
              "611000,4100000,50", "--surface", "TOP_gradient", "--out", tmp_path / "dd")
    assert res.exit_code == 2 and "TOP_gradient (gradient of unit TOP) is not a head surface" in res.stderr


def test_deleted_product_file_is_named(mini_store, tmp_path, runner):
    out = tmp_path / "out"
    _surface(runner, mini_store, out)
    (out / "TOP_head.tif").unlink()
    res = cli(runner, "drawdown", mini_store, "--unit", "TOP", "--days", 10, "-S", 1e-3, "-T", 100, "--new-well",
              "611000,4100000,50", "--out", out)
    assert res.exit_code == 2 and res.stderr.count("\n") == 1, res.output
    assert "TOP_head (head surface of unit TOP)" in res.stderr and str(out / "TOP_head.tif") in res.stderr
    assert "deleted or moved" in res.stderr and "hydroatlas surface" in res.stderr
    listed = {p["name"]: p for p in _products_json(runner, mini_store)}
    assert listed["TOP_head"]["missing_files"] == 1 and listed["TOP_gradient"]["missing_files"] == 0


# -- the store: lock, read-only file, upgrade ----------------------------------------------------------------
def test_read_only_store_refuses_before_any_work(mini_store, tmp_path, runner, monkeypatch):
    """The record needs the write lock: a store this process may not write is refused at once (exit 2, the
    permissions named) and no output file is written."""
    monkeypatch.setattr(gpkg_sql, "is_writable", lambda path: False)
    out = tmp_path / "out"
    res = cli(runner, "surface", mini_store, "--unit", "TOP", "--method", "idw", "--cell", 100, "--out", out)
    assert res.exit_code == 2 and "read-only (permissions)" in res.stderr, res.output
    assert not out.exists()


def test_a_held_write_lock_is_waited_for_then_named(mini_store, tmp_path, runner, monkeypatch):
    monkeypatch.setenv(gpkg_sql.BUSY_TIMEOUT_ENV, "0.3")
    holder = sqlite3.connect(mini_store, isolation_level=None)
    holder.execute("BEGIN IMMEDIATE")
    try:
        res = cli(runner, "surface", mini_store, "--unit", "TOP", "--method", "idw", "--cell", 100,
                  "--out", tmp_path / "out")
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    assert res.exit_code == 2 and "locked by another writer" in res.stderr, res.output
    _surface(runner, mini_store, tmp_path / "out")  # the lock gone, it runs


def _make_version_3(path):
    """Turn a current store into what schema version 3 wrote: no product registry."""
    conn = sqlite3.connect(path)
    conn.execute("BEGIN")
    conn.execute("DROP TABLE products")
    conn.execute("DELETE FROM gpkg_contents WHERE table_name = 'products'")
    conn.execute("DROP INDEX IF EXISTS record_history_by_table")
    conn.execute("UPDATE hydroatlas_settings SET value = '3' WHERE key = 'schema_version'")
    conn.execute("COMMIT")
    conn.close()


def test_upgrade_from_version_3_adds_the_registry_and_keeps_every_row(mini_store, tmp_path, runner):
    _make_version_3(mini_store)
    res = cli(runner, "surface", mini_store, "--unit", "TOP", "--method", "idw", "--out", tmp_path / "o")
    assert res.exit_code == 2 and "hydroatlas upgrade" in res.stderr
    conn = sqlite3.connect(mini_store)
    before = {t: conn.execute(f'SELECT * FROM "{t}" ORDER BY fid').fetchall() for t in TABLES if t != "products"}
    conn.close()
    res = _ok(runner, "upgrade", mini_store)
    assert f"upgraded to {SCHEMA_VERSION}" in res.output and SCHEMA_VERSION == "4"
    conn = sqlite3.connect(mini_store)
    after = {t: conn.execute(f'SELECT * FROM "{t}" ORDER BY fid').fetchall() for t in TABLES if t != "products"}
    assert after == before
    assert conn.execute("SELECT data_type FROM gpkg_contents WHERE table_name = 'products'").fetchone() == \
        ("attributes",)
    assert conn.execute("SELECT count(*) FROM products").fetchone() == (0,)
    assert conn.execute("SELECT count(*) FROM sqlite_master WHERE name = 'record_history_by_table'").fetchone() == (1,)
    conn.close()
    assert _products_json(runner, mini_store) == []
    _surface(runner, mini_store, tmp_path / "o")
    assert [p["name"] for p in _products_json(runner, mini_store)] == ["TOP_head", "TOP_gradient"]


# -- no folder is a database any more ------------------------------------------------------------------------
def test_no_workflow_finds_inputs_by_globbing_a_folder():
    found = [f"{p.name}:{i}" for p in sorted((ROOT / "hydroatlas" / "workflows").glob("*.py"))
             for i, line in enumerate(p.read_text(encoding="utf-8").splitlines(), start=1) if "glob(" in line]
    assert found == []


def test_cli_kind_list_is_the_library_list():
    from hydroatlas.cli import products as cli_products

    assert cli_products._KINDS == products.KINDS
