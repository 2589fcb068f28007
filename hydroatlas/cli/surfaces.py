"""The surface command: kriged or IDW surfaces of a unit's head or log K."""

from __future__ import annotations

from ._common import (
    COUNT,
    Finite,
    NON_NEGATIVE,
    POSITIVE,
    Quantity,
    SURFACE_METHODS,
    SURFACE_QUANTITIES,
    _date_value,
    _in_crs_units,
    _policy,
    _progress_bar,
    _report,
    _say_selection,
    _tolerance_days,
    _OptionError,
    _window_value,
    click,
    format_option,
    main,
    open_store,
    selection_options,
    tolerance_option,
    with_caution,
    workflows,
)


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code.")
@click.option("--quantity", type=click.Choice(SURFACE_QUANTITIES), default="head", show_default=True,
              help="head, logk (log10 K in the store's K unit: ft/d or m/d), dhead (head minus the head of "
                   "the unit below) or change (mean head in --window minus mean head in --baseline, per zone).")
@click.option("--method", type=click.Choice(SURFACE_METHODS), default="kriging", show_default=True,
              help="kriging (ordinary), uk (universal, linear drift) or idw.")
@click.option("--window", default=None, callback=_window_value,
              help="ISO 8601 interval FROM/TO for heads (median per zone; with --quantity change, the mean).")
@click.option("--baseline", default=None, callback=_window_value,
              help="With --quantity change: the ISO 8601 interval FROM/TO the window is compared with.")
@click.option("--at", default=None, callback=_date_value, help="Date: the head reading nearest to it, per zone.")
@tolerance_option
@click.option("--cell", type=POSITIVE, default=None,
              help="Cell size in CRS units (default: 1, 2, 2.5 or 5 x 10^k, at or just below 1/200 of the "
                   "extent); grid edges fall on whole multiples of the cell.")
@click.option("--variogram", type=click.Choice(["spherical", "exponential", "gaussian"]), default="spherical",
              show_default=True, help="Variogram model, fitted by weighted least squares unless fixed.")
@click.option("--nugget", type=NON_NEGATIVE, default=None, help="Fix the nugget.")
@click.option("--sill", type=POSITIVE, default=None, help="Fix the total sill (with --range).")
@click.option("--range", "range_", type=POSITIVE, default=None, help="Fix the practical range (with --sill).")
@click.option("--neighbors", type=Finite(min=0, integer=True), default=None,
              help="Nearest points per cell; 0 = all (one global system). Default: all up to 400 points, else 16.")
@click.option("--lower-unit", default=None,
              help="For dhead: the unit whose head is subtracted (default: the next aquifer below, across any "
                   "aquitard or confining unit; the sidecar names it).")
@click.option("--buffer", type=Quantity("length", POSITIVE), default=None,
              help="Mask distance around the data when no domain polygon (CRS units, or a length with its unit).")
@click.option("--fallback-idw", is_flag=True, help="Use IDW when no variogram can be fitted (all values equal).")
@click.option("--max-cells", type=COUNT, default=None, help="Refuse grids larger than this (default 50,000,000).")
@click.option("--compare-methods", is_flag=True,
              help="Cross-validate kriging, uk and idw (leave-one-out) and record all three; default: only --method.")
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
@click.option("--scheduler", envvar="HYDROATLAS_SCHEDULER", default=None, metavar="ADDRESS",
              help="Compute the tiles on a Dask cluster: its scheduler address (tcp://HOST:8786) or scheduler file; "
                   "tiles go into the GeoTIFF as they arrive. Default: $HYDROATLAS_SCHEDULER, else this machine. "
                   "Needs pip install 'hydroatlas[dask]' here and hydroatlas on every worker.")
@selection_options
@format_option
@with_caution("surface")
def surface(store, unit, quantity, method, window, baseline, at, tolerance, cell, variogram, nugget, sill, range_, neighbors,
            lower_unit, buffer, fallback_idw, max_cells, compare_methods, out, scheduler, include_poor,
            include_pumping_wells, exclude_wells, fmt):
    """Interpolate head, log K or head difference of one unit onto a grid.

    Writes OUT/<unit>_<quantity>.tif (band 1 estimate, band 2 kriging standard
    deviation), OUT/<unit>_<quantity>.json (method, variogram, neighbourhood,
    leave-one-out cross-validation of the method, or of every method with
    --compare-methods, window) and, for heads,
    OUT/<unit>_gradient.tif and the flow_arrows layer of OUT/layers.gpkg.
    The grid covers the domain polygon (areas of kind domain) or the data.

    --quantity change maps the change of head between two periods (e.g. the decline
    of a drought): per zone the mean head in --window minus the mean head in
    --baseline (both required; zones without readings in both are listed as left
    out), kriged like a head surface; OUT/<unit>_change_zones.csv holds the
    per-zone table.

    Example: hydroatlas surface district.gpkg --unit ULS --quantity head --window 2024-03-01/2024-03-31

    On a Dask cluster: hydroatlas surface district.gpkg --unit ULS --scheduler tcp://10.0.0.5:8786
    """
    if quantity == "change":
        missing = [name for name, value in (("--window", window), ("--baseline", baseline)) if value is None]
        if missing:
            raise _OptionError(f"--quantity change needs both --window and --baseline (ISO 8601 intervals "
                               f"FROM/TO); missing {' and '.join(missing)}")
        if at is not None:
            raise _OptionError("--quantity change compares two windows: give --window and --baseline, not --at")
    elif baseline is not None:
        raise _OptionError(f"--baseline is for --quantity change only (got --quantity {quantity})")
    with open_store(store) as s, _progress_bar("grid rows") as bar:
        result = workflows.build_surface(s, unit, quantity, method=method, window=window, at=at, cell=cell,
                                         variogram=variogram, nugget=nugget, sill=sill, range_=range_,
                                         neighbors="auto" if neighbors is None else (neighbors or None),
                                         buffer=_in_crs_units(buffer, s), out=out,
                                         fallback_idw=fallback_idw, max_cells=max_cells, lower_unit=lower_unit,
                                         progress=bar, tolerance_days=_tolerance_days(tolerance),
                                         policy=_policy(include_poor, include_pumping_wells, exclude_wells),
                                         compare_methods=compare_methods, baseline=baseline,
                                         scheduler=(scheduler or "").strip() or None)
    warnings = _say_selection(result.get("selection"))
    for e in (result.get("change") or {}).get("zones_left_out", []):
        warnings.append(f"zone {e['zone_id']} of well {e['well_id']} left out of the change: {e['reason']} "
                        f"({e['count']} reading(s) in the other window)")
        click.echo(f"warning: {warnings[-1]}", err=True)
    cv = result["cross_validation"].get(result["selected_method"], {})
    if fmt != "table":
        _report(fmt, {"unit": unit, "quantity": quantity, "value_unit": result["value_unit"],
                      "method": result["selected_method"], "n_points": result["n_points"],
                      "cross_validation": cv, "files": result["files"], "selection": result.get("selection"),
                      "product": result["product"], "gradient_product": result.get("gradient_product"),
                      "warnings": warnings, "caution": result.get("caution")})
        return
    click.echo(f"{unit} {quantity} by {result['selected_method']} from {result['n_points']} wells; "
               f"leave-one-out RMSE {cv.get('rmse', float('nan')):.4g} {result['value_unit']}")
    for kind, path in result["files"].items():
        click.echo(f"  {kind}: {path}")
    recorded = [result["product"]] + ([result["gradient_product"]] if result.get("gradient_product") else [])
    click.echo(f"  product: {', '.join(recorded)} (recorded in the store)")
