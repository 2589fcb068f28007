"""The input column contract, declared once (hydroatlas/store/schema.py columns, hydroatlas/store/columns.py).

Checks that the table SQL, the importer, the data dictionary and the help text all follow the one declaration:
every declared constraint of every kind is tried against the importer with a file that breaks only that cell,
and SQLite itself (the reference for the table definitions) must refuse a row that breaks a declared check.
The data are invented (the mini district of conftest.py plus one new row per kind).
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest

from conftest import write_csv
from hydroatlas.errors import ImportDataError
from hydroatlas.store import open_store
from hydroatlas.store import importers
from hydroatlas.store.columns import (
    DATA_DICTIONARY, INPUTS, column_help, data_dictionary, kind_table,
)
from hydroatlas.store.schema import REQUIRED, TABLES

ROOT = Path(__file__).resolve().parents[1]

# one valid row per kind, against the mini store (units TOP, MID, LOW; wells W1-W4; zone W1/P1 at 10-20)
BASE = {
    "units": {"code": "NEW", "name": "New", "rank": "9", "role": "aquifer", "parent": "TOP"},
    "wells": {"well_id": "W9", "x": "611500", "y": "4100500", "ground_elev": "300", "total_depth": "50",
              "kind": "monitoring", "name": "n"},
    "picks": {"well_id": "W4", "unit": "TOP", "top_depth": "0", "bottom_depth": "30"},
    "zones": {"well_id": "W4", "zone_id": "S9", "top_depth": "10", "bottom_depth": "20", "kind": "screen",
              "unit": "TOP"},
    "ktests": {"well_id": "W1", "zone_id": "P1", "test_id": "T9", "tested_on": "2024-05-01", "method": "slug",
               "k": "1", "k_unit": "m/d", "quality": "good", "source": "s", "orientation": "vertical"},
    "heads": {"well_id": "W1", "zone_id": "P1", "measured_at": "2024-07-01T00:00:00", "head": "290",
              "depth_to_water": "10", "ref_elev": "300", "quality": "good"},
    "pumping": {"well_id": "W1", "zone_id": "P1", "rate": "1", "rate_unit": "m3/d", "start": "2024-01-01",
                "end": "2024-02-01"},
    "springs": {"spring_id": "S9", "x": "611000", "y": "4100500", "elev": "250", "name": "n", "unit": "TOP"},
    "discharge": {"spring_id": "S9", "measured_at": "2024-01-01", "discharge": "5", "rate_unit": "L/s"},
    "slugtests": {"well_id": "W1", "zone_id": "P1", "test_id": "T1", "t_s": "0", "displacement": "1"},
    "sluggeometry": {"well_id": "W1", "zone_id": "P1", "test_id": "T1", "casing_radius": "0.05",
                     "well_radius": "0.1", "screen_length": "3", "aquifer_thickness": "10", "static_depth": "5",
                     "tested_on": "2024-05-01", "screen_top_depth": "10", "confined": "true",
                     "geometry_kind": "screen"},
}
# a transducer test: two readings of the static level, the slug, three readings after it
TRANSDUCER = [{"well_id": "W1", "zone_id": "P1", "test_id": "X1", "timestamp": f"2024-06-02T10:00:0{i}",
               "value": v, "value_unit": "m", "test_start": ""} for i, v in enumerate(("1", "1", "2", "1.5", "1.2"))]


def _write(folder: Path, kind: str, rows: list[dict]) -> Path:
    header = list(rows[0])
    return write_csv(folder / f"{kind}.csv", [header] + [[r[c] for c in header] for r in rows])


def _areas(folder: Path, props: dict) -> Path:
    # a square about 1 km wide inside the mini district (WGS 84 degrees; the store is UTM zone 16 N)
    ring = [[-85.77, 37.03], [-85.76, 37.03], [-85.76, 37.04], [-85.77, 37.04], [-85.77, 37.03]]
    doc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": props, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}
    path = folder / "areas.geojson"
    path.write_text(json.dumps(doc))
    return path


def _rows(kind: str) -> list[dict]:
    return [dict(r) for r in TRANSDUCER] if kind == "transducer" else [dict(BASE[kind])]


def _file(folder: Path, kind: str, rows: list[dict]) -> Path:
    return _areas(folder, rows[0]) if kind == "areas" else _write(folder, kind, rows)


def _base(kind):
    return {"area_id": "A9", "kind": "recharge", "unit": "TOP"} if kind == "areas" else None


def _breakages(kind: str):
    """(column, bad value or None to drop the column, words the error must hold) for each declared constraint."""
    for c in INPUTS[kind].columns:
        if c.name in ("lon", "lat", "longitude", "latitude"):
            continue  # the coordinate pair rule: tests/test_importers.py
        form = c.value_form
        if c.input == REQUIRED:
            yield c.name, None, ("missing required field" if kind == "areas" else "missing required column") \
                + f"(s) {c.name}"
        if c.input == REQUIRED or c.filled:
            yield c.name, "", "empty value; " + ("a number is required" if form in ("number", "whole number")
                                                 else "this column is required")
        if form == "choice":
            yield c.name, "bogus", f"'bogus' is not one of {', '.join(c.allowed)}"
        elif form in ("K unit", "rate unit"):
            yield c.name, "bogus", "unit 'bogus'; expected one of"
        elif form in ("date", "date-time", "instant"):
            yield c.name, "2024", "'2024' is not an ISO 8601 date"
        elif form in ("number", "whole number"):
            yield c.name, "abc", "'abc' is not a number"
            if form == "whole number":
                yield c.name, "2.5", f"{c.name} must be a whole number ({c.hint})"
            if c.minimum is not None:
                bad = c.minimum if c.above else c.minimum - 1
                words = c.message or ("greater than zero" if c.above and c.minimum == 0 else
                                      "must not be negative" if c.minimum == 0 else
                                      f"{c.name} must be {c.minimum:g} or more")
                yield c.name, f"{bad:g}", words
            if c.maximum is not None:
                yield c.name, f"{c.maximum + 1:g}", f"must be at most {c.maximum:g}"


@pytest.fixture
def store_with_spring(mini_store, tmp_path):
    importers_dir = tmp_path / "springs_first"
    importers_dir.mkdir()
    with open_store(mini_store) as store:
        importers.import_file(store, "springs", _write(importers_dir, "springs", [BASE["springs"]]))
    return mini_store


@pytest.mark.parametrize("kind", list(INPUTS))
def test_importer_follows_the_declaration(store_with_spring, tmp_path, kind):
    folder = tmp_path / kind
    folder.mkdir()
    rows = [_base(kind)] if kind == "areas" else _rows(kind)
    with open_store(store_with_spring) as store:
        before = store.count(INPUTS[kind].table)
        cases = list(_breakages(kind))
        assert cases  # every kind declares constraints
        for column, value, words in cases:
            bad = [dict(r) for r in rows]
            if value is None:
                for r in bad:
                    del r[column]
            else:
                bad[0][column] = value
            with pytest.raises(ImportDataError) as info:
                importers.import_file(store, kind, _file(folder, kind, bad))
            assert words in str(info.value), (column, value, str(info.value))
            assert info.value.column == column
            assert info.value.row == (0 if value is None else 1)
            assert store.count(INPUTS[kind].table) == before  # nothing half-imported
        report = importers.import_file(store, kind, _file(folder, kind, rows))  # the unbroken file is good
        assert report.rows == (3 if kind == "transducer" else 1)  # transducer: the readings from the start on
        assert store.count(INPUTS[kind].table) == before + report.inserted


def test_importer_tables_come_from_the_declaration():
    assert importers.KINDS == tuple(INPUTS)
    for kind, spec in INPUTS.items():
        assert importers.REQUIRED[kind] == spec.required
        assert importers.OPTIONAL[kind] == spec.optional
        assert importers.TABLE_OF.get(kind, kind) == spec.table
        table_columns = {c.name for c in TABLES[spec.table].columns}
        # an input column is a column of the table, or one kept elsewhere (coordinates in degrees, attrs)
        assert {c.name for c in spec.columns} - table_columns <= {
            "lon", "lat", "longitude", "latitude", "screen_top_depth", "confined", "geometry_kind", "timestamp",
            "value", "value_unit", "test_start"}
    assert set(importers.TRANSDUCER_UNITS) == set(INPUTS["transducer"].column("value_unit").allowed)
    from hydroatlas.cli._common import KINDS as CLI_KINDS

    assert tuple(CLI_KINDS) == tuple(INPUTS)


# every check of the store schema version 3, written by hand before the declaration made them: none is lost
V3_CHECKS = {
    "units": {"role IN ('aquifer', 'aquitard', 'confining', 'other')", "rank >= 1", "parent IS NULL OR parent <> code"},
    "wells": {"total_depth IS NULL OR total_depth > 0",
              "(kind IS NULL OR kind IN ('monitoring', 'multizone', 'pumping', 'supply', 'other'))"},
    "picks": {"top_depth >= 0", "bottom_depth > top_depth"},
    "zones": {"top_depth >= 0", "bottom_depth > top_depth",
              "(kind IS NULL OR kind IN ('screen', 'port', 'open_hole', 'packer'))"},
    "ktests": {"k > 0", "k_ms > 0", "method IN ('slug', 'pumping', 'packer', 'core', 'specific_capacity', 'other')",
               "(quality IS NULL OR quality IN ('good', 'fair', 'poor'))",
               "(orientation IS NULL OR orientation IN ('horizontal', 'vertical'))"},
    "heads": {"(quality IS NULL OR quality IN ('good', 'fair', 'poor'))"},
    "pumping": {"rate >= 0", '"end" IS NULL OR "end" >= start'},
    "discharge": {"discharge >= 0"},
    "areas": {"kind IN ('recharge', 'domain', 'noflow')"},
    "slug_records": {"t_s >= 0"},
    "slug_geometry": {"casing_radius > 0", "well_radius > 0", "screen_length > 0"},
}


def test_table_checks_come_from_the_declaration(mini_store):
    for table, checks in V3_CHECKS.items():
        assert checks <= set(TABLES[table].checks), table
    # SQLite, not hydroatlas, enforces them: a row that breaks a declared range or choice is refused
    con = sqlite3.connect(mini_store)
    try:
        for sql in ("UPDATE units SET rank = 10001 WHERE code = 'TOP'",
                    "UPDATE units SET role = 'bogus' WHERE code = 'TOP'",
                    "UPDATE ktests SET k = 0 WHERE rowid = (SELECT min(rowid) FROM ktests)",
                    "UPDATE zones SET top_depth = -1 WHERE well_id = 'W1' AND zone_id = 'P1'"):
            with pytest.raises(sqlite3.IntegrityError, match="CHECK constraint failed"):
                con.execute(sql)
    finally:
        con.close()


def test_data_dictionary_is_made_from_the_declaration():
    text = (ROOT / DATA_DICTIONARY).read_text(encoding="utf-8")
    assert data_dictionary(text) == text, ("docs/data-dictionary.md is out of date: run python -c \"from "
                                           "hydroatlas.store.columns import write_data_dictionary; "
                                           "write_data_dictionary()\"")
    for kind, spec in INPUTS.items():
        table = kind_table(kind)
        assert table in text
        listed = [line.split("|")[1].strip().strip("`") for line in table.splitlines()
                  if line.startswith("| `")]
        assert listed == [c.name for c in spec.columns]
    with pytest.raises(ValueError, match="no block of the columns of"):
        data_dictionary(text.replace("<!-- generated: columns heads -->", "<!-- heads -->"))
    with pytest.raises(ValueError, match="unknown generated block"):
        data_dictionary(text + "<!-- generated: columns nope -->\n<!-- end generated -->\n")


def test_column_help():
    summary = column_help()
    assert summary.splitlines()[0] == "units: code, name, rank, role, parent?"
    assert "pumping: well_id, zone_id?, rate, rate_unit, start, end?" in summary.splitlines()
    for kind, spec in INPUTS.items():
        text = column_help(kind)
        assert all(len(line) <= 110 for line in text.splitlines()), kind
        names = [line.split()[0] for line in text.splitlines()[1:] if line.startswith("  ") and
                 len(line.split()) > 1 and line.split()[1] in ("required", "optional")]
        assert names == [c.name for c in spec.columns], kind
    assert "hydraulic conductivity, as given; converted to m/s in k_ms (the unit in k_unit; > 0)" in \
        " ".join(column_help("ktests").split())
    with pytest.raises(KeyError, match="unknown kind"):
        column_help("nope")


def test_import_help_is_generated_from_the_contract():
    """`import --help` lists each kind's columns from the same declaration (a generated module keeps --help
    free of library imports)."""
    from click.testing import CliRunner

    from hydroatlas.cli import _import_help, main

    assert _import_help.COLUMNS == column_help()
    res = CliRunner().invoke(main, ["import", "--help"])
    assert res.exit_code == 0
    for line in column_help().splitlines():
        assert line.strip() in res.stdout
