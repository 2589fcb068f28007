"""Commands that create, fill, check and keep the store: init, import, check, retire, restore, history, upgrade, demo."""

from __future__ import annotations

from ._import_help import COLUMNS as IMPORT_COLUMNS
from ._common import (
    KINDS,
    _OptionError,
    _emit,
    _note,
    _progress_bar,
    _remember_format,
    _report,
    click,
    format_option,
    main,
    open_store,
    pd,
    workflows,
)


@main.command()
@click.argument("store")
@click.option("--crs", required=True, help="Horizontal CRS of the store, e.g. EPSG:32615.")
@click.option("--length-unit", type=click.Choice(["m", "ft"]), default="m", show_default=True,
              help="Unit of depths, elevations and heads.")
@click.option("--vertical-datum", default="unspecified", show_default=True, help="Label of the vertical datum.")
@format_option
def init(store, crs, length_unit, vertical_datum, fmt):
    """Create a new, empty store.

    Example: hydroatlas init district.gpkg --crs EPSG:32615 --length-unit m --vertical-datum NAVD88
    """
    s = workflows.init_store(store, crs=crs, length_unit=length_unit, vertical_datum=vertical_datum)
    store = s.location  # a URL's password is not shown
    facts = {"store": store, "crs": s.settings.crs.to_string(), "crs_name": s.settings.crs.name,
             "length_unit": s.settings.length_unit, "vertical_datum": s.settings.vertical_datum}
    s.close()
    if fmt != "table":
        _report(fmt, facts)
        return
    click.echo(f"created {store} (CRS {facts['crs_name']}, lengths in {facts['length_unit']}, "
               f"vertical datum {facts['vertical_datum']})")


@main.command(name="import", epilog="\b\nColumns of each KIND (? = optional; units, allowed values and rules of each column:\n"
              "docs/data-dictionary.md):\n" + IMPORT_COLUMNS)
@click.argument("store")
@click.argument("kind", type=click.Choice(KINDS))
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--input-crs", default=None, help="CRS of the file's coordinates if not the store's.")
@click.option("--clear-empty", is_flag=True,
              help="An empty cell of an optional column clears the stored value (by default it keeps it).")
@format_option
def import_(store, kind, file, input_crs, clear_empty, fmt):
    """Import one file of KIND into the store, whole or not at all.

    Re-importing a file updates rows by their natural key and adds no duplicates;
    every value it changes keeps its earlier version in the record history
    ('hydroatlas history'). Optional columns left out of the file, and empty
    optional cells, keep the stored values. Import in this order: units, wells,
    picks, zones, then ktests, heads, pumping; springs before discharge; areas
    any time after units.

    Example: hydroatlas import district.gpkg wells wells.csv --input-crs EPSG:4326
    """
    with open_store(store) as s, _progress_bar(kind) as progress:
        report = workflows.import_data(s, kind, file, input_crs=input_crs, progress=progress,
                                       clear_empty=clear_empty)
    if fmt != "table":  # the notes are in the document; they stay on stderr too
        for note in report.notes:
            _note(note)
        _report(fmt, {"kind": report.kind, "file": report.file, "rows": report.rows, "inserted": report.inserted,
                      "updated": report.updated, "unchanged": report.unchanged, "notes": list(report.notes)})
        return
    click.echo(report.summary())
    for note in report.notes:
        _note(note, err=False)


@main.command()
@click.argument("store")
@format_option(default=None)
@click.option("--json", "as_json", is_flag=True, help="The same as --format json (the older spelling).")
def check(store, fmt, as_json):
    """Report data-quality findings: straddling zones, pick gaps and overlaps,
    wells without picks, orphans, K outliers and heads far outside their unit's range."""
    if as_json and fmt not in (None, "json"):
        raise _OptionError(f"--json is the same as --format json; it cannot go with --format {fmt}")
    fmt = "json" if as_json else (fmt or "table")
    _remember_format(click.get_current_context(), None, fmt)
    with open_store(store) as s:
        findings = workflows.check_store(s)
    frame = pd.DataFrame(findings, columns=["kind", "severity", "well_id", "zone_id", "unit", "message"])
    if fmt != "table":
        _emit(frame, fmt, findings)
    else:
        _emit(frame, "table")
        counts = frame["kind"].value_counts()
        click.echo("\n" + (", ".join(f"{k}: {v}" for k, v in counts.items()) or "no findings"))


@main.command()
@click.option("--out", default="demo_out", show_default=True, type=click.Path(file_okay=False),
              help="Folder for the demo store and its outputs.")
@format_option
def demo(out, fmt):
    """Build the invented demo region and run the whole pipeline on it."""
    from ..demo import run_demo

    if fmt == "table":
        run_demo(out, echo=click.echo)
        return
    def to_stderr(line: str) -> None:  # csv and json: stdout holds the one document; the report goes to stderr
        if line.startswith("Caution:"):
            click.echo(line, err=True)  # a caution is not a note: -q keeps it
        elif line.strip():
            _note(line.strip())

    res = run_demo(out, echo=to_stderr)
    facts = {"store": res["store"], "out": str(out), "files": res.get("files", {}),
             "n_findings": len(res["findings"]), "stats": res["stats"]}
    _report(fmt, facts, rows=res["stats"] if fmt == "csv" else None)


if __name__ == "__main__":  # pragma: no cover
    main()


_RECORD_ID_HELP = ("Each ID is the record's key, its parts joined by '/': a well 'W1', a zone 'W1/P2', a K test "
                   "'W1/P2/T7' (or 'W1/P2/slug@2024-05-01' when the file gave no test_id), a head "
                   "'W1/P2/2024-05-01T10:00:00'.")


@main.command()
@click.argument("store")
@click.argument("kind", type=click.Choice(KINDS))
@click.argument("ids", nargs=-1, required=True)
@click.option("--reason", required=True, help="Why the records are retired (kept with them).")
@format_option
def retire(store, kind, ids, reason, fmt):
    """Take records out of every computation without deleting them.

    Retired records stay in the store, are listed by 'check' and come back
    with 'restore'. Zones, tests and readings of a retired well (or zone, or
    spring) leave the computations with it.

    Example: hydroatlas retire district.gpkg ktests W1/P2/T7 --reason "packer leak found in the field log"
    """
    with open_store(store) as s:
        n = workflows.retire_records(s, kind, list(ids), reason=reason)
    if fmt != "table":
        _report(fmt, {"kind": kind, "ids": list(ids), "retired": n, "already_retired": len(ids) - n,
                      "reason": reason.strip()})
        return
    click.echo(f"retired {n} {kind} record(s)" + (f"; {len(ids) - n} already retired" if n < len(ids) else ""))


retire.help += "\n\n" + _RECORD_ID_HELP


@main.command()
@click.argument("store")
@click.argument("kind", type=click.Choice(KINDS))
@click.argument("ids", nargs=-1, required=True)
@format_option
def restore(store, kind, ids, fmt):
    """Bring retired records back into the computations.

    Example: hydroatlas restore district.gpkg ktests W1/P2/T7
    """
    with open_store(store) as s:
        n = workflows.restore_records(s, kind, list(ids))
    if fmt != "table":
        _report(fmt, {"kind": kind, "ids": list(ids), "restored": n, "not_retired": len(ids) - n})
        return
    click.echo(f"restored {n} {kind} record(s)" + (f"; {len(ids) - n} were not retired" if n < len(ids) else ""))


restore.help += "\n\n" + _RECORD_ID_HELP


@main.command()
@click.argument("store")
@click.argument("kind", type=click.Choice(KINDS))
@click.argument("id_")
@format_option
def history(store, kind, id_, fmt):
    """Print every version of one record, oldest first; the last line is the current version.

    Example: hydroatlas history district.gpkg wells W1
    """
    with open_store(store) as s:
        versions = workflows.record_history(s, kind, id_)
    _emit(pd.DataFrame(versions), fmt, versions)


history.help += "\n\n" + _RECORD_ID_HELP


@main.command()
@click.argument("store")
@format_option
def upgrade(store, fmt):
    """Migrate a store made by an older hydroatlas to this release's schema, in one transaction.

    Example: hydroatlas upgrade district.gpkg
    """
    from ..store import upgrade_store

    old, new = upgrade_store(store)
    if store.startswith(("postgresql://", "postgresql+psycopg://", "postgres://")):  # the password is not shown
        from ..store.postgis import display_url

        store = display_url(store)
    if fmt != "table":
        _report(fmt, {"store": store, "old_version": old, "new_version": new, "upgraded": old != new})
        return
    click.echo(f"{store}: schema version {old} is current" if old == new
               else f"{store}: schema version {old} upgraded to {new}")
