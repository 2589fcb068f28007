"""The products command: the derived products recorded in a store, with their freshness."""

from __future__ import annotations

from ._common import _report, click, format_option, main, open_store

_KINDS = ("surface", "gradient", "pathways", "contributing_areas", "drawdown", "model_grid", "map", "layers",
          "figures")


@main.command()
@click.argument("store")
@click.option("--kind", default=None, metavar="KIND",
              help=f"Only products of this kind ({', '.join(_KINDS)}, or a kind added later).")
@click.option("--unit", default=None, help="Only products of this unit code.")
@format_option
def products(store, kind, unit, fmt):
    """Derived products recorded in the store, oldest first.

    Every surface, gradient, pathways run, contributing-area run, drawdown
    scenario, model grid, map, layer export and figure set is recorded with its
    kind, unit, parameters, files, the products it used and the command that
    remakes it. The stale column says whether rows of a store table it was made
    from changed since (changed_tables names them): a command that uses a stale
    product refuses it unless given --allow-stale. missing_files counts its files
    that were deleted or moved.

    Example: hydroatlas products district.gpkg --kind surface --format json
    """
    from .. import products as registry

    with open_store(store) as s:
        table = registry.product_table(s, kind=kind, unit=unit)
    if fmt == "json":
        _report(fmt, table.to_dict(orient="records"))
        return
    shown = table[["name", "kind", "unit", "quantity", "created_utc", "stale", "changed_tables", "missing_files",
                   "inputs", "command"]].copy()
    for col in ("changed_tables", "inputs"):
        shown[col] = [", ".join(v) for v in shown[col]]
    if fmt == "csv":
        _report(fmt, {}, rows=shown)
        return
    if shown.empty:
        click.echo("(no product recorded" + (f" of kind {kind}" if kind else "") + (f" of unit {unit}" if unit else "")
                   + "; surface, paths, drawdown, grid, map, layers and figures record theirs)")
        return
    click.echo(shown.drop(columns=["command"]).to_string(index=False, na_rep="-"))
    for name, command in zip(shown["name"], shown["command"]):
        click.echo(f"  {name}: {command}")
