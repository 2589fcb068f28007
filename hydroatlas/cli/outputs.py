"""Commands that write maps, GIS layers, figures and model grids: map, layers, figures, grid."""

from __future__ import annotations

from ._common import (
    ANGLE,
    COUNT,
    FINITE,
    POSITIVE,
    Quantity,
    _Pair,
    _in_units,
    _policy,
    _report,
    _say_selection,
    _say_stale,
    allow_stale_option,
    _store_units,
    click,
    format_option,
    k_unit_option,
    main,
    open_store,
    selection_options,
    surface_option,
    surfaces_option,
    with_caution,
    workflows,
)


@main.command(name="map")
@click.argument("store")
@click.option("--unit", default=None,
              help="Unit whose K, head contours, extent and results are shown (default: the aquifer with the most "
                   "zones with heads).")
@k_unit_option
@surface_option
@click.option("--scenario", "scenarios", multiple=True, metavar="NAME",
              help="Show the drawdown of this scenario ('drawdown --name NAME', or a scenario's product name; may "
                   "be repeated); default: every scenario of the unit recorded in the store.")
@allow_stale_option
@surfaces_option
@click.option("--tiles", default=None, help="Basemap URL template (needs internet); none by default.")
@click.option("--title", default=None, help="Title of the map (default: the store's name and the unit).")
@click.option("--out", default="map.html", show_default=True, type=click.Path(dir_okay=False))
@selection_options
@format_option
@with_caution("map")
def map_(store, unit, k_unit, surface, scenarios, allow_stale, surfaces, tiles, title, out, include_poor,
         include_pumping_wells, exclude_wells, fmt):
    """One self-contained HTML web map that works offline.

    Wells coloured by K with a ring by kind, head contours, flow arrows, kriging
    standard deviation, the log-K surface, pumping wells sized by rate, springs
    (discharge in the popup), recharge areas, pathlines coloured by travel time,
    contributing areas, labelled drawdown contours and proposed wells, each
    switchable; a title, the head window and the scenario in a panel, a legend
    entry per layer, a north arrow and a scale bar in the store's unit.
    """
    stale = []
    with open_store(store) as s:
        path = workflows.build_map(s, unit=unit, out=out, surfaces=surfaces, k_unit=k_unit, tiles=tiles,
                                   policy=_policy(include_poor, include_pumping_wells, exclude_wells), title=title,
                                   surface=surface, scenarios=list(scenarios) or None, allow_stale=allow_stale,
                                   warnings=stale)
    _say_stale(stale)
    if fmt != "table":
        _report(fmt, {"files": {"map": path}})
        return
    click.echo(f"map: {path}")


@main.command()
@click.argument("store")
@k_unit_option
@allow_stale_option
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False))
@selection_options
@format_option
def layers(store, k_unit, allow_stale, surfaces, out, include_poor, include_pumping_wells, exclude_wells, fmt):
    """Vector layers to OUT/layers.gpkg and OUT/geojson/*.geojson (RFC 7946, WGS 84).

    wells (with per-unit K columns), zones (points at mid-depth), head contours, and
    the flow arrows, pathlines and contributing areas made by 'surface' and 'paths'.
    """
    with open_store(store) as s:
        stale = []
        files = workflows.export_layers(s, out=out, surfaces=surfaces, k_unit=k_unit, allow_stale=allow_stale,
                                        warnings=stale,
                                        policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    _say_stale(stale)
    if fmt != "table":
        _report(fmt, {"files": files}, rows=[{"kind": k, "path": v} for k, v in files.items()])
        return
    for kind, path in files.items():
        click.echo(f"  {kind}: {path}")


@main.command()
@click.argument("store")
@k_unit_option
@allow_stale_option
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False))
@click.option("--map", "board_map", is_flag=True,
              help="Also the static map for reports, OUT/map_<unit>.png, .svg and .pdf: the web map's layers with "
                   "a title, legend, scale bar in the store's unit, north arrow and the caution line.")
@click.option("--unit", default=None, help="Unit of the --map figure (default: as the map command's).")
@click.option("--title", default=None, help="Title of the --map figure (default: the store's name and the unit).")
@selection_options
@format_option
def figures(store, k_unit, allow_stale, surfaces, out, board_map, unit, title, include_poor, include_pumping_wells,
            exclude_wells, fmt):
    """PNG and SVG figures: head against elevation at each multi-zone well (units as bands, head
    difference across each aquitard), log10 K per unit with the geometric mean and its 95 % CI,
    fitted over experimental variograms, and leave-one-out cross-validation of each surface; with
    --map, the static map for reports as PNG, SVG and PDF."""
    if (unit is not None or title is not None) and not board_map:
        raise click.UsageError("--unit and --title apply to the --map figure; add --map")
    with open_store(store) as s:
        stale = []
        files = workflows.make_figures(s, out=out, surfaces=surfaces, k_unit=k_unit,
                                       policy=_policy(include_poor, include_pumping_wells, exclude_wells),
                                       board_map=board_map, unit=unit, title=title, allow_stale=allow_stale,
                                       warnings=stale)
    _say_stale(stale)
    if fmt != "table":
        _report(fmt, {"n_files": len(files), "folder": out, "files": list(files)},
                rows=[{"file": f} for f in files])
        return
    click.echo(f"{len(files)} files in {out}")


@main.command()
@click.argument("store")
@click.option("--cell", type=POSITIVE, required=True, help="Cell size in CRS units.")
@click.option("--origin", type=_Pair("X,Y", FINITE, "two finite numbers"), default=None,
              help="X,Y of the lower-left corner (needed with --rotation).")
@click.option("--shape", type=_Pair("ROWS,COLS", COUNT, "two whole numbers >= 1"), default=None,
              help="ROWS,COLS (needed with --origin).")
@click.option("--rotation", type=ANGLE, default=0.0, show_default=True,
              help="Degrees counter-clockwise about the origin.")
@click.option("--layers", default=None, help="Unit codes, top first, comma separated (default: all picked units).")
@click.option("--kv-ratio", type=POSITIVE, default=10.0, show_default=True,
              help="K_h / K_v of a unit without vertical K tests (ktests column orientation).")
@click.option("--k-source", type=click.Choice(["mean", "surface"]), default="mean", show_default=True)
@click.option("--min-thickness", type=Quantity("length", POSITIVE), default=1.0, show_default=True,
              help="Smallest layer thickness (store length unit, or a length with its unit, e.g. 0.5m); a thinner "
                   "cell, or one where the unit is absent, is a vertical pass-through cell (idomain -1) and no "
                   "other layer moves.")
@click.option("--merge-down", is_flag=True,
              help="A unit left out of --layers between two chosen ones joins the layer below (default: above).")
@click.option("--base", type=Quantity("length", FINITE, metavar="ELEV[UNIT]"), default=None,
              help="Elevation of the bottom of the lowest layer (store length unit), for a unit no well goes "
                   "through.")
@click.option("--base-thickness", type=Quantity("length", POSITIVE), default=None,
              help="Thickness of the lowest layer below its top (store length unit), instead of --base. Without "
                   "either, a lowest unit no well goes through gets its mean penetrated thickness, with a warning.")
@click.option("--mf6", type=click.Path(file_okay=False), default=None,
              help="Also write a MODFLOW 6 simulation into this folder (needs flopy): DIS, NPF, IC, WEL for the "
                   "wells pumping now, DRN for the springs, OC, and an IMS file without settings.")
@click.option("--spring-conductance", type=Quantity("transmissivity", POSITIVE, metavar="C[UNIT]"), default=None,
              help="Drain conductance of each spring cell in the --mf6 simulation, length squared per day (store "
                   "units, e.g. 1000 or 500m2/d); needed when a spring lies in the grid, no default.")
@surface_option(multiple=True, what="head or log-K")
@allow_stale_option
@surfaces_option
@click.option("--max-cells", type=COUNT, default=None, help="Refuse grids larger than this (default 20,000,000).")
@click.option("--out", default="model.nc", show_default=True, type=click.Path(dir_okay=False))
@selection_options
@format_option
@with_caution("model_grid")
def grid(store, cell, origin, shape, rotation, layers, kv_ratio, k_source, min_thickness, merge_down, base,
         base_thickness, mf6, spring_conductance, surface, allow_stale, surfaces, max_cells, out, include_poor,
         include_pumping_wells, exclude_wells, fmt):
    """Model-ready grid: one layer per unit with top, bottom, K_h, K_v and starting heads.

    Writes FILE.nc (NetCDF, CF-1.8), a folder FILE_arrays/ with one .npy and one
    text file per layer and variable, and manifest.json beside it. K is in the
    store's length unit per day. With --mf6 DIR, also a MODFLOW 6 simulation
    (steady state; springs as drains with --spring-conductance).

    Example: hydroatlas grid district.gpkg --cell 250 --layers CAP,ULS,SHL,LCL --out model/district.nc
    """
    with open_store(store) as s:
        L = s.settings.length_unit
        min_thickness, base, base_thickness = (_in_units(v, "length", L, default_unit=L)
                                               for v in (min_thickness, base, base_thickness))
        su = _store_units(s)
        spring_conductance = _in_units(spring_conductance, "transmissivity", su.transmissivity,
                                       default_unit=su.transmissivity)
        res = workflows.model_grid(s, cell=cell, out=out, origin=origin, shape=shape, rotation=rotation,
                                   layers=[c.strip() for c in layers.split(",")] if layers else None,
                                   kv_ratio=kv_ratio, k_source=k_source, min_thickness=min_thickness,
                                   merge_down=merge_down, base=base, base_thickness=base_thickness, mf6=mf6,
                                   spring_conductance=spring_conductance,
                                   surfaces=surfaces, max_cells=max_cells, surface=list(surface) or None,
                                   allow_stale=allow_stale,
                                   policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    warnings = _say_stale(res.get("stale_inputs_used"))
    warnings += _say_selection(res.get("selection"))
    for note in res.get("notes", []):
        if note.startswith("warning: "):
            click.echo(note, err=True)
            warnings.append(note[len("warning: "):])
    nl, nr, nc = res["shape"]
    if fmt != "table":
        m6 = res.get("mf6")
        for w in (m6 or {}).get("wells_left_out", []):  # on stderr as with the table; in the document too
            click.echo(f"left out of WEL: well {w['well_id']} zone {w['zone_id']}: {w['reason']}", err=True)
        for sp in (m6 or {}).get("springs_left_out", []):
            click.echo(f"left out of DRN: spring {sp['spring_id']}: {sp['reason']}", err=True)
        _report(fmt, {"shape": {"layers": nl, "rows": nr, "columns": nc}, "layers": res["layers"],
                      "files": res["files"], "notes": res.get("notes", []), "selection": res.get("selection"),
                      "warnings": warnings,
                      "mf6": None if not m6 else {k: m6.get(k) for k in ("name", "folder", "wells", "springs",
                                                                       "wells_left_out", "springs_left_out",
                                                                       "spring_conductance",
                                                                       "spring_conductance_unit", "rate_unit")}})
        return
    click.echo(f"model grid: {nl} layers ({', '.join(res['layers'])}) x {nr} rows x {nc} columns")
    for kind, path in res["files"].items():
        click.echo(f"  {kind}: {path}")
    m6 = res.get("mf6")
    if m6:
        cond = ("" if m6["spring_conductance"] is None else
                f", conductance {m6['spring_conductance']:g} {m6['spring_conductance_unit']}")
        click.echo(f"MODFLOW 6 simulation {m6['name']}: {len(m6['wells'])} pumped zone(s) in WEL (rates in "
                   f"{m6['rate_unit']}), {len(m6['springs'])} spring(s) in DRN{cond}; IMS without settings "
                   "(MODFLOW 6 defaults); not run by hydroatlas")
        for w in m6["wells_left_out"]:
            click.echo(f"left out of WEL: well {w['well_id']} zone {w['zone_id']}: {w['reason']}", err=True)
        for sp in m6["springs_left_out"]:
            click.echo(f"left out of DRN: spring {sp['spring_id']}: {sp['reason']}", err=True)
