"""Commands on flow: paths (pathways and contributing areas) and drawdown (pumping scenarios)."""

from __future__ import annotations

from ._common import (
    DEFAULT_POROSITY,
    DEFAULT_STORATIVITY,
    FINITE,
    FRACTION,
    NON_NEGATIVE,
    OPEN_FRACTION,
    POSITIVE,
    ParameterError,
    Quantity,
    UnitName,
    _Checked,
    _OptionError,
    _in_crs_units,
    _in_units,
    _policy,
    _report,
    _say_selection,
    _say_stale,
    allow_stale_option,
    _store_units,
    click,
    convert,
    format_option,
    main,
    open_store,
    selection_options,
    surface_option,
    surfaces_option,
    with_caution,
    workflows,
)


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code (a head surface of it must be recorded in the store).")
@click.option("--porosity", type=FRACTION, default=None,
              help=f"Effective porosity n_e, in (0, 1] (default {DEFAULT_POROSITY}, with a warning: give the "
                   "value for your rock).")
@click.option("--backward", is_flag=True, help="Track backward from the springs and outline contributing areas.")
@click.option("--k-source", type=click.Choice(["mean", "surface"]), default="mean", show_default=True,
              help="K from the unit's geometric mean or from its log-K surface.")
@surface_option(multiple=True, what="head or log-K")
@allow_stale_option
@surfaces_option
@click.option("--seed-spacing", type=Quantity("length", POSITIVE), default=None,
              help="Spacing of seeds in recharge areas (CRS units, or a length with its unit, e.g. 100ft).")
@click.option("--capture-radius", type=Quantity("length", POSITIVE), default=None,
              help="Particles end within this of any spring or pumping well (CRS units, or a length with its "
                   "unit, e.g. 50m; default: each sink's stagnation distance Q / (2 pi b K i), Javandel and "
                   "Tsang 1986, kept between a quarter cell and a quarter of the grid; 2 cells for a spring "
                   "without discharge readings).")
@click.option("--scenario", default=None,
              help="Trace on the head surface of the drawdown scenario NAME ('drawdown --name NAME', or the "
                   "product name of a scenario, as 'hydroatlas products STORE' lists it), with its proposed "
                   "wells as sinks.")
@click.option("--max-years", type=Quantity("time", POSITIVE), default=1000.0, show_default=True,
              help="Longest travel time tracked, in years (or with a time unit, e.g. 500d).")
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
@selection_options
@format_option
@with_caution("pathways")
def paths(store, unit, porosity, backward, k_source, surface, allow_stale, surfaces, seed_spacing, capture_radius,
          scenario, max_years, out, include_poor, include_pumping_wells, exclude_wells, fmt):
    """Likely pathways from recharge areas to springs, pumping wells or the domain edge.

    Particles move with the Darcy seepage velocity v = K i / n_e on the unit's head
    surface (made by 'hydroatlas surface --quantity head' and recorded in the store:
    the latest, or --surface NAME), integrated by an adaptive
    Dormand-Prince 5(4) scheme. Forward: seeds over each recharge area. --backward:
    paths from each spring and its contributing area. Sinks are the springs and the
    wells pumping at the end of the head window (stopped wells are not sinks), each
    capturing within its stagnation distance. Writes the pathlines (and
    contributing_areas) layers of OUT/layers.gpkg and OUT/<unit>_pathways.csv
    (backward: OUT/<unit>_pathways_backward.csv; --scenario NAME adds _NAME).

    Example: hydroatlas paths district.gpkg --unit ULS --porosity 0.02 --out maps/
    """
    warnings = []
    if porosity is None:
        porosity = DEFAULT_POROSITY
        warnings.append(f"--porosity not given; using n_e = {DEFAULT_POROSITY} (travel times scale with n_e: "
                        "give the effective porosity of your unit)")
        click.echo(f"warning: {warnings[-1]}", err=True)
    with open_store(store) as s:
        seed_spacing = _in_crs_units(seed_spacing, s)
        capture_radius = _in_crs_units(capture_radius, s)
        max_years = _in_units(max_years, "time", "yr", default_unit="yr")
        result = workflows.trace_paths(s, unit, porosity=porosity, out=out, surfaces=surfaces, backward=backward,
                                       k_source=k_source, seed_spacing=seed_spacing, capture_radius=capture_radius,
                                       max_years=max_years, scenario=scenario, surface=surface or None,
                                       allow_stale=allow_stale,
                                       policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    warnings += _say_stale(result.get("stale_inputs_used"))
    for line in result.get("warnings", []):
        click.echo(f"warning: {line}", err=True)
    warnings += list(result.get("warnings", [])) + _say_selection(result.get("selection"))
    if fmt != "table":
        _report(fmt, {"unit": unit, "direction": result["direction"], "n_particles": result["n_particles"],
                      "porosity": porosity, "pathways": result["table"], "files": result["files"],
                      "product": result["product"], "input_products": result["input_products"],
                      "selection": result.get("selection"), "warnings": warnings,
                      "caution": result.get("caution"), "karst_warning": workflows.KARST_WARNING},
                rows=result["table"])
        return
    click.echo(f"{result['n_particles']} particles tracked {result['direction']} on the {unit} head surface")
    click.echo(result["table"].to_string(index=False, float_format=lambda v: f"{v:.4g}"))
    click.echo(f"Caution: {workflows.KARST_WARNING}")
    for kind, path in result["files"].items():
        click.echo(f"  {kind}: {path}")
    click.echo(f"  product: {result['product']} (recorded in the store, from {', '.join(result['input_products'])})")


RATE = Quantity("rate", FINITE, metavar="Q[UNIT]")


class _RateUnitError(_OptionError):
    """A rate whose number is fine but whose unit is unknown (said as such, not as a malformed item)."""


def _rate_m3d(q, label: str, rate_unit: str) -> float:
    """A rate typed in an option (e.g. "450gpm", "0.5 cfs", "2000") in m3/d; a bare number is in ``rate_unit``."""
    from ..errors import UnitError
    from ..quantities import factor, split_quantity

    try:
        split_quantity(q, "rate")
    except UnitError as exc:
        raise _RateUnitError(f"{label}: {exc}") from None
    except ParameterError:
        pass  # not a number: RATE.check says so
    number, unit = RATE.check(q, label)
    return number * factor(unit or rate_unit, "rate")


def _parse_rates(values, rate_unit: str = "m3/d"):
    """WELL=Q items as {well: rate in m3/d}; Q may carry a rate unit, a bare Q is in ``rate_unit``."""
    out = {}
    for item in values:
        wid, sep, q = item.partition("=")
        try:
            if not (sep and wid.strip()):
                raise ValueError
            out[wid.strip()] = _rate_m3d(q, "--rate", rate_unit)
        except _RateUnitError:
            raise
        except (ValueError, _OptionError):
            raise _OptionError(f"--rate must be WELL=Q with Q a finite number (got {item})") from None
    return out


def _parse_new_wells(values, rate_unit: str = "m3/d"):
    """[NAME,]X,Y,Q items as (name, x, y, rate in m3/d); X, Y in the store CRS, Q as in :func:`_parse_rates`."""
    out = []
    for n, item in enumerate(values, start=1):
        parts = item.split(",")
        try:
            if len(parts) not in (3, 4):
                raise ValueError
            x, y = (FINITE.check(p, "--new-well") for p in parts[-3:-1])
            q = _rate_m3d(parts[-1], "--new-well", rate_unit)
        except _RateUnitError:
            raise
        except (ValueError, _OptionError):
            raise _OptionError(f"--new-well must be [NAME,]X,Y,Q with X, Y, Q finite numbers "
                               f"(got {item})") from None
        name = parts[0].strip() if len(parts) == 4 else ""
        out.append((name or f"proposed-{n}", x, y, q))
    return out


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code (a head surface of it must be recorded in the store).")
@click.option("--days", type=Quantity("time", POSITIVE), required=True,
              help="Pumping duration: days, or a number with a time unit (s, min, h, d, yr; e.g. 1yr).")
@click.option("--storativity", "-S", type=OPEN_FRACTION, default=None,
              help=f"Storage coefficient S, in (0, 1) (default {DEFAULT_STORATIVITY}, a confined aquifer, "
                   "with a warning).")
@click.option("--rate", "rates", multiple=True, type=_Checked(lambda v: _parse_rates(v)),
              help="WELL=Q: rate of a stored well (replaces its stored rate); Q may name its unit "
                   "(PW-1=450gpm, PW-2=0.5cfs).")
@click.option("--new-well", "new_wells", multiple=True, type=_Checked(lambda v: _parse_new_wells(v)),
              help="[NAME,]X,Y,Q: a proposed well (X, Y in the store CRS; Q may name its unit, e.g. 450gpm).")
@click.option("--rate-unit", type=UnitName("rate"), default=None,
              help="Unit of rates given without one in --rate and --new-well: m3/d, m3/s, L/s, gpm, gpd, MGD, "
                   "ft3/d, ft3/s (cfs), acre-ft/yr (default: the store's, ft3/d or m3/d).")
@click.option("--transmissivity", "-T", type=Quantity("transmissivity", POSITIVE), default=None,
              help="T, e.g. 2700ft2/d, '250 m2/d' or 20000gpd/ft; a bare number is in the store's length unit "
                   "squared per day (default: the unit's geometric-mean K times its thickness).")
@click.option("--threshold", type=Quantity("length", NON_NEGATIVE), default=0.5, show_default=True,
              help="List springs and monitoring zones losing more head than this, e.g. 2ft (a bare number is "
                   "in the store's length unit).")
@click.option("--name", default=None,
              help="Scenario name: outputs OUT/<unit>_drawdown_<name>.tif, OUT/<unit>_head_<name>.tif, "
                   "OUT/<unit>_drawdown_<name>_impacts.csv and .json, recorded in the store as product "
                   "<unit>_drawdown_<name>; 'paths --scenario NAME' and 'map --scenario NAME' use it.")
@click.option("--from-unpumped", is_flag=True,
              help="Total drawdown of all pumping (baseline wells at their rates plus the scenario) on the head "
                   "surface adjusted to unpumped conditions by adding back the baseline wells' Theis drawdown at "
                   "the end of the head window.")
@surface_option
@allow_stale_option
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
@selection_options
@format_option
@with_caution("drawdown")
def drawdown(store, unit, days, storativity, rates, new_wells, rate_unit, transmissivity, threshold, surface,
             allow_stale, surfaces, out, name, from_unpumped, include_poor, include_pumping_wells, exclude_wells,
             fmt):
    """Theis drawdown of a pumping scenario, superposed on the unit's head surface.

    The baseline: measured heads already hold the cones of the wells that pumped
    during the head window of the surface (pumping records of the unit active
    in that window, at their rates at its end). By default the result is the
    change the scenario makes against that baseline: proposed wells (--new-well)
    and changed rates (--rate WELL=Q) add drawdown, stopped wells (--rate WELL=0)
    give recovery (negative drawdown), unchanged baseline wells add nothing.
    --from-unpumped gives the total drawdown of all pumping instead, on the head
    surface adjusted to unpumped conditions (the baseline wells' Theis drawdown
    at the end of the head window added back). T is the unit's geometric-mean K
    times its thickness at each well, from wells that penetrate the unit fully.
    Writes OUT/<unit>_drawdown.tif, OUT/<unit>_head_drawdown.tif (head after the
    scenario), OUT/<unit>_drawdown_impacts.csv (springs and monitoring zones
    above the threshold or taken below the unit's top or bottom) and a JSON
    sidecar with the head window, the baseline wells and the changes; with
    --name NAME the files carry the name.

    Example: hydroatlas drawdown district.gpkg --unit ULS --days 365 -S 0.001 --rate ZP-031=2000
    """
    warnings = []
    if storativity is None:
        storativity = DEFAULT_STORATIVITY
        warnings.append(f"--storativity not given; using S = {DEFAULT_STORATIVITY} (typical of a confined "
                        "aquifer; an unconfined one is nearer 0.01-0.3: give the value for your unit)")
        click.echo(f"warning: {warnings[-1]}", err=True)
    with open_store(store) as s:
        su = _store_units(s)  # a bare number is in the store's units; rates in --rate-unit when given
        days = _in_units(days, "time", "d", default_unit="d")
        transmissivity = _in_units(transmissivity, "transmissivity", "m2/d", default_unit=su.transmissivity)
        threshold = _in_units(threshold, "length", su.length, default_unit=su.length)
        q_unit = rate_unit or su.rate
        res = workflows.drawdown_scenario(s, unit, days=days, storativity=storativity,
                                          rates=_parse_rates(rates, q_unit),
                                          new_wells=_parse_new_wells(new_wells, q_unit), rate_unit="m3/d",
                                          transmissivity=transmissivity, surfaces=surfaces, out=out,
                                          threshold=threshold, name=name, from_unpumped=from_unpumped,
                                          surface=surface, allow_stale=allow_stale,
                                          policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    warnings += _say_stale(res.get("stale_inputs_used"))
    warnings += _say_selection(res.get("selection"))
    for line in res.get("warnings", []):
        click.echo(f"warning: {line}", err=True)
    warnings += list(res.get("warnings", []))
    if fmt != "table":
        _report(fmt, {"unit": unit, "mode": res["mode"], "days": days, "storativity": storativity,
                      "transmissivity_m2_per_d": res["transmissivity_m2_per_d"],
                      "transmissivity": {"value": convert(res["transmissivity_m2_per_d"], "m2/d", su.transmissivity,
                                                          "transmissivity"), "unit": su.transmissivity},
                      "length_unit": res["length_unit"], "max_drawdown": res["max_drawdown"],
                      "min_drawdown": res["min_drawdown"], "threshold": threshold, "baseline": res["baseline"],
                      "changes": res["changes"], "impacts": res["impacts"], "files": res["files"],
                      "product": res["product"], "head_surface_product": base_product(res),
                      "selection": res.get("selection"), "warnings": warnings, "caution": res.get("caution")},
                rows=res["impacts"])
        return
    base = res["baseline"]
    click.echo(f"{res['mode']}: {len(base['wells'])} baseline wells pumping in the head window "
               f"{base['head_window']['text']}, {len(res['changes'])} changes")
    t_m2d = res["transmissivity_m2_per_d"]
    t_text = (f"{convert(t_m2d, 'm2/d', su.transmissivity, 'transmissivity'):.4g} {su.transmissivity}"
              + (f" ({t_m2d:.4g} m2/d)" if su.transmissivity != "m2/d" else ""))
    click.echo(f"{days:g} d, T = {t_text}, "
               f"S = {storativity:g}; largest drawdown {res['max_drawdown']:.3g} {res['length_unit']}"
               + (f", largest recovery {-res['min_drawdown']:.3g} {res['length_unit']}"
                  if (res["min_drawdown"] or 0) < 0 else ""))
    imp = res["impacts"]
    if imp.empty:
        click.echo(f"no spring or monitoring zone loses more than {threshold:g} {res['length_unit']}")
    else:
        click.echo(imp[["kind", "id", "zone_id", "drawdown"]].to_string(index=False, na_rep="",
                                                                        float_format=lambda v: f"{v:.3g}"))
    for kind, path in res["files"].items():
        click.echo(f"  {kind}: {path}")
    click.echo(f"  product: {res['product']} (recorded in the store, on head surface {base_product(res)})")


def base_product(res: dict) -> str:
    """The head surface product a drawdown scenario was computed on (from its sidecar)."""
    return res["baseline"]["head_surface_product"]
