"""The copy command: a whole store from a GeoPackage to PostGIS or back, losing nothing."""

from __future__ import annotations

from ._common import _progress_bar, _report, click, format_option, main, workflows


@main.command(name="copy")
@click.argument("src")
@click.argument("dst")
@format_option
def copy_(src, dst, fmt):
    """Copy the whole store SRC into a new store DST: GeoPackage to PostGIS, PostGIS to GeoPackage (or the same
    backend), losing nothing.

    Every table is copied row by row with its fid: the records with their source file, row and retirement,
    the record history, the import log, the product registry and the settings; geometries keep their exact
    coordinates. DST must not hold a store yet: a new GeoPackage file, or a PostgreSQL database without one
    (PostGIS is added to it when missing). The copy is one transaction; if it fails, DST is removed again.

    Example: hydroatlas copy district.gpkg postgresql://hydro@db.example.org/district
    """
    from ..store.postgis import display_url, is_server_url

    shown = {"src": display_url(src) if is_server_url(src) else src,
             "dst": display_url(dst) if is_server_url(dst) else dst}
    with _progress_bar("copying") as bar:
        counts = workflows.copy_store(src, dst, progress=lambda table, n: bar(n))
    if fmt != "table":
        _report(fmt, {**shown, "rows": counts}, rows=[{"table": t, "rows": n} for t, n in counts.items()]
                if fmt == "csv" else None)
        return
    total = sum(n for t, n in counts.items() if t != "hydroatlas_settings")
    click.echo(f"copied {shown['src']} to {shown['dst']}: {total} rows in {len(counts) - 1} tables")
    for table, n in counts.items():
        click.echo(f"  {table}: {n}")
