"""Commands that report on the store's measurements: stats, verticals, threepoint, slugs."""

from __future__ import annotations

from ._common import (
    HydroatlasError,
    PER_CHOICES,
    SLUG_METHODS,
    _date_value,
    _emit,
    _policy,
    _say_selection,
    _tolerance_days,
    _window_value,
    click,
    format_option,
    k_unit_option,
    main,
    math,
    open_store,
    pd,
    selection_options,
    tolerance_option,
    workflows,
)


@main.command()
@click.argument("store")
@click.option("--unit", default=None, help="Only this unit code.")
@k_unit_option
@click.option("--per", type=click.Choice(PER_CHOICES), default="test", show_default=True,
              help="What counts once: every test, the log-mean of each zone, or of each well.")
@format_option
@click.option("--exclude-straddles", is_flag=True, help="Leave out zones that cross units.")
@click.option("--exclude-poor", is_flag=True,
              help="Leave out tests of quality 'poor'. This is now the default (kept so that old scripts work); "
                   "--include-poor brings them back.")
@click.option("--wells", "by_well", is_flag=True,
              help="Per-well transmissivity and effective K_h / K_v instead of unit statistics.")
@selection_options
def stats(store, unit, k_unit, per, fmt, exclude_straddles, exclude_poor, by_well, include_poor,
          include_pumping_wells, exclude_wells):
    """Hydraulic-conductivity statistics per unit (geometric mean, log variance, 95 % CI).

    Variances are sample variances (ddof = 1) of log10 K and ln K. Tests of quality
    poor and tests in wells given to --exclude-wells are left out: n_left_out counts
    them per unit, and a note on stderr says how many and why.

    Example: hydroatlas stats district.gpkg --per zone --k-unit ft/d --format json
    """
    policy = _policy(include_poor, include_pumping_wells, exclude_wells)
    with open_store(store) as s:
        if by_well:
            frame = workflows.well_profiles(s, k_unit=k_unit, unit=unit, exclude_poor=exclude_poor, policy=policy)
            _say_selection(frame.attrs.get("selection"))
            _emit(frame, fmt)
            return
        rows = workflows.unit_stats(s, unit=unit, per=per, k_unit=k_unit, exclude_straddles=exclude_straddles,
                                    exclude_poor=exclude_poor, policy=policy)
    _say_selection(getattr(rows, "selection", None))
    if fmt == "json":
        _emit(pd.DataFrame(), "json", rows)
        return
    if not rows:
        raise HydroatlasError("the store has no units; import a units file first")
    frame = pd.DataFrame(rows)
    if fmt == "table":
        frame["ci95"] = [("-" if v is None or v[0] is None or not math.isfinite(v[0])
                          else f"{v[0]:.3g}-{v[1]:.3g}") for v in frame["k_geomean_ci95"]]
        frame = frame[["unit", "role", "n_tests", "n_zones", "n_wells", "k_geomean", "ci95", "k_median",
                       "k_min", "k_max", "log10k_mean", "log10k_std", "lnk_var", "n_left_out"]]
        click.echo(f"K in {rows[0]['k_unit']} (log10 K of K in {rows[0]['k_unit']}); statistics per {per}")
    else:
        lo_hi = frame.pop("k_geomean_ci95")
        frame["k_geomean_ci95_low"] = [v[0] if v else None for v in lo_hi]
        frame["k_geomean_ci95_high"] = [v[1] if v else None for v in lo_hi]
    _emit(frame, fmt)


@main.command()
@click.argument("store")
@click.option("--window", default=None, callback=_window_value,
              help="ISO 8601 interval FROM/TO: median head of each zone inside it.")
@click.option("--at", default=None, callback=_date_value,
              help="Date: the reading nearest to it, per zone (instead of --window).")
@tolerance_option
@click.option("--profiles", is_flag=True, help="Print the head profile of each multi-zone well instead of pairs.")
@format_option
@selection_options
def verticals(store, window, at, tolerance, profiles, fmt, include_poor, include_pumping_wells, exclude_wells):
    """Head differences, vertical gradients and aquitard leakage at multi-zone wells.

    One row per pair of successive zones (top down): dhead is the upper head minus
    the lower head (positive = downward flow), vertical_gradient is dhead over the
    distance between the zone midpoints, and leakage_flux is the Darcy flux across
    the aquitard and confining units between them, dhead / sum(b / K), with K the
    unit's geometric-mean K used as vertical K.

    Example: hydroatlas verticals district.gpkg --window 2024-03-01/2024-03-31 --format json
    """
    with open_store(store) as s:
        pairs, prof = workflows.verticals(s, window=window, at=at, tolerance_days=_tolerance_days(tolerance),
                                          policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    _say_selection(pairs.attrs.get("selection"), only="heads")  # the K tests only set the leakage K
    frame = prof if profiles else pairs
    _emit(frame, fmt)


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code.")
@click.option("--wells", required=True, help="Three well ids, comma separated.")
@click.option("--window", default=None, callback=_window_value, help="ISO 8601 interval FROM/TO for heads.")
@click.option("--at", default=None, callback=_date_value, help="Date: the reading nearest to it.")
@tolerance_option
@format_option
@selection_options
def threepoint(store, unit, wells, window, at, tolerance, fmt, include_poor, include_pumping_wells, exclude_wells):
    """Hydraulic gradient and flow direction from the heads of three wells (plane through three points).

    Example: hydroatlas threepoint district.gpkg --unit ULS --wells W1,W2,W3
    """
    with open_store(store) as s:
        res = workflows.three_point_wells(s, unit, [w.strip() for w in wells.split(",")], window=window, at=at,
                                          tolerance_days=_tolerance_days(tolerance),
                                          policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    _say_selection(res.get("selection"), only="heads")
    if fmt == "json":
        _emit(pd.DataFrame(), "json", res)
    else:
        _emit(pd.DataFrame([{k: v for k, v in res.items() if k not in ("wells", "heads", "selection")}]), fmt)


@main.command()
@click.argument("store")
@click.option("--method", type=click.Choice(SLUG_METHODS), default="auto", show_default=True,
              help="auto: the method the response and geometry call for, with the reason shown.")
@click.option("--no-write", is_flag=True, help="Only report; do not store the K values as K tests.")
@click.option("--figures", "figures_dir", default=None, type=click.Path(file_okay=False),
              help="Folder for one figure per test (normalised head against time, repeats overlaid).")
@format_option
def slugs(store, method, no_write, figures_dir, fmt):
    """Reduce slug-test records to K and store one K test per physical test.

    Methods: Hvorslev (1951) and Bouwer and Rice (1976), fitted as the slope of
    ln(H/H0) over H/H0 0.15-0.25 and 0.20-0.30; Cooper, Bredehoeft and Papadopulos
    (1967) for confined intervals with storage; a damped-oscillator model for
    oscillating responses in very permeable units. Each record is diagnosed first
    (response type, points in the fit window, r2, residual pattern, normalised-head
    range fitted, shape-factor validity, agreement of the zone's repeats); with
    --method auto the method is chosen from the response and the geometry and the
    reason is shown. Every applicable method's result is kept in the K test's
    attributes; the K test is 'slug:<test_id>' and a re-run updates it (see
    'history'). K is in the store's K unit (ft/d in a feet store, m/d in a metre
    store). Import the records (kind slugtests or transducer) and the geometry
    (kind sluggeometry) first.

    Example: hydroatlas slugs district.gpkg --method auto --figures figures/slugs
    """
    with open_store(store) as s:
        out = workflows.reduce_slug_tests(s, method=method, write=not no_write, figures=figures_dir)
    # K in the store's K unit (named in k_unit); csv and json also carry k_ms (m/s) and, json, the alternatives
    cols = ["well_id", "zone_id", "test_id", "method", "k", "k_unit", "response", "n_points", "r2",
            "residual_pattern", "h_range", "shape_valid", "repeat_disagree", "quality", "reason", "problem"]
    if fmt != "table":
        cols += ["k_ms", "valid", "unit"]
    if fmt == "json":
        cols += ["alternatives"]
    shown = out[[c for c in cols if c in out]]
    if fmt == "table":
        shown = shown.assign(alternatives=[", ".join(f"{a['method']} " + ("refused" if a["k"] is None else
                                                                          f"{a['k']:.3g}") for a in alts) or "-"
                                           for alts in out["alternatives"]])
    if fmt != "table":
        _emit(shown, fmt)
        return
    # the table holds the figures; the reasons and problems (sentences) follow it, one line per test
    _emit(shown.drop(columns=["reason", "problem"], errors="ignore"), fmt)
    for r in out.itertuples():
        ident = f"{r.well_id}/{r.zone_id}/{r.test_id}"
        if isinstance(r.reason, str):
            click.echo(f"{ident}: {r.method}: {r.reason}")
        if isinstance(r.problem, str):
            click.echo(f"{ident}: problem: {r.problem}")
    if figures_dir is not None:
        click.echo(f"{len(out.attrs.get('figures', []))} figure files in {figures_dir}")
