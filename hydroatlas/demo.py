"""Build the invented demo region and run the workflows on it (not the CLI)."""

from __future__ import annotations

import json
import runpy
from importlib import resources
from pathlib import Path
from typing import Callable

import pandas as pd

from . import workflows

DEMO_POROSITY = 0.02  # effective porosity of the karst limestone (invented, plausible for fractured carbonate)
#: the demo's drought and a baseline of the same season a year earlier (demo_region/README.md)
DEMO_DROUGHT = "2023-08-01/2023-11-30"
DEMO_BASELINE = "2022-08-01/2022-11-30"
#: Lanternfall Spring's index zone (the generator makes its discharge follow this zone's head)
DEMO_INDEX_ZONE = "ZP-010/S1"
DEMO_HYDROGRAPH_WELLS = ("ZP-010", "ZP-024", "ZP-025")
DEMO_SPRING_CONDUCTANCE = 1000.0  # m2/d, drain conductance of a spring cell in the MODFLOW 6 simulation (invented)
IMPORT_ORDER = ("units", "wells", "picks", "zones", "ktests", "heads", "pumping", "springs", "discharge", "areas",
                "slugtests", "sluggeometry")
_FILES = {kind: f"{kind}.csv" for kind in IMPORT_ORDER}
_FILES["areas"] = "areas.geojson"
#: every file the demo reads, shipped as package data (hydroatlas/demo_data, written by demo_region/generate.py)
REGION_FILES = tuple(_FILES.values()) + ("crs.txt",)
DEMO_DATA = "demo_data"


def demo_region_dir() -> Path:
    """The demo_region folder of the source tree (generator and README; absent from an installed wheel)."""
    return Path(__file__).resolve().parent.parent / "demo_region"


def demo_data():
    """The packaged input files of the demo region, as an importlib.resources Traversable."""
    return resources.files("hydroatlas").joinpath(DEMO_DATA)


def ensure_region_files(target: Path) -> Path:
    """A folder holding the demo region's input files.

    The package data when complete (found through importlib.resources, so an installed wheel works; copied into
    ``target`` when the package is not a plain folder, e.g. zipped), else freshly generated into ``target`` by
    demo_region/generate.py of a source tree.
    """
    data = demo_data()
    if all(data.joinpath(f).is_file() for f in REGION_FILES):
        if isinstance(data, Path):
            return data
        target.mkdir(parents=True, exist_ok=True)
        for name in REGION_FILES:
            (target / name).write_bytes(data.joinpath(name).read_bytes())
        return target
    generator = demo_region_dir() / "generate.py"
    if not generator.is_file():
        missing = [f for f in REGION_FILES if not data.joinpath(f).is_file()]
        raise FileNotFoundError(f"the demo region's files are missing from the package ({', '.join(missing)}) "
                                "and there is no demo_region/generate.py to make them; reinstall hydroatlas")
    target.mkdir(parents=True, exist_ok=True)
    runpy.run_path(str(generator))["build"](target)
    return target


def run_demo(out, *, echo: Callable[[str], None] = print) -> dict:
    """Create ``out/zephyrine.gpkg`` from the demo region, import everything, and write the outputs."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    region = ensure_region_files(out / "region")
    store_path = out / "zephyrine.gpkg"
    if store_path.exists():
        store_path.unlink()
    crs = (region / "crs.txt").read_text().strip()
    store = workflows.init_store(store_path, crs=crs, length_unit="m", vertical_datum="invented datum (demo)")
    try:
        for kind in IMPORT_ORDER:
            report = workflows.import_data(store, kind, region / _FILES[kind])
            echo(report.summary())
        # method chosen per test from its response and geometry; make_figures below draws one figure per test
        slugs = workflows.reduce_slug_tests(store, method="auto")
        echo(f"slug tests: {int(slugs['k_ms'].notna().sum())} of {len(slugs)} reduced (method chosen per test: "
             + ", ".join(f"{m} {n}" for m, n in slugs["method"].value_counts().items())
             + f") and stored as one K test each ({int(slugs['repeat_disagree'].sum())} flagged for disagreeing "
             "repeats)")
        slugs.drop(columns=["alternatives"]).to_csv(out / "slug_tests.csv", index=False)
        stats_rows = workflows.unit_stats(store, k_unit="m/d")
        (out / "unit_stats.json").write_text(json.dumps(stats_rows, indent=2, default=float))
        table = pd.DataFrame(stats_rows)[["unit", "role", "n_tests", "n_zones", "n_wells", "k_geomean",
                                         "k_median", "log10k_std", "lnk_var"]]
        profiles = workflows.well_profiles(store, k_unit="m/d")
        profiles.to_csv(out / "well_profiles.csv", index=False)
        findings = workflows.check_store(store)
        pd.DataFrame(findings).to_csv(out / "check.csv", index=False)
        workflows.zone_assignment(store).to_csv(out / "zone_units.csv", index=False)
        pairs, profiles = workflows.verticals(store)
        pairs.to_csv(out / "verticals.csv", index=False)
        profiles.to_csv(out / "head_profiles.csv", index=False)
        surfaces = out / "surfaces"
        units = store.read("units")
        written = []
        for code in units.loc[units["role"] == "aquifer"].sort_values("rank")["code"]:
            for quantity in ("head", "logk"):
                res = workflows.build_surface(store, code, quantity, method="kriging", out=surfaces)
                cv = res["cross_validation"]["kriging"]
                written.append(f"  {code} {quantity}: {res['n_points']} points, leave-one-out RMSE "
                               f"{cv['rmse']:.3g} {res['value_unit']} -> {Path(res['files']['raster']).name}")
        res = workflows.build_surface(store, "ULS", "dhead", method="kriging", lower_unit="LCL", out=surfaces)
        written.append(f"  ULS dhead (minus {res['lower_unit']}): {res['n_points']} wells -> "
                       f"{Path(res['files']['raster']).name}")
        fwd = workflows.trace_paths(store, "ULS", porosity=DEMO_POROSITY, out=surfaces)
        bwd = workflows.trace_paths(store, "ULS", porosity=DEMO_POROSITY, out=surfaces, backward=True)
        # the spring question: hydrographs of the multi-zone wells and the index zone with the drought shaded,
        # the drought's head change as a map, discharge against head at the index zone (cease-flow head and
        # trigger levels), then the pumping scenario reports what it takes from the spring
        hydro = workflows.write_hydrographs(store, out=out / "hydrographs",
                                            wells=DEMO_HYDROGRAPH_WELLS, springs=["SP-1"],
                                            window=DEMO_DROUGHT, baseline=DEMO_BASELINE)
        change = workflows.build_surface(store, "ULS", "change", method="kriging", window=DEMO_DROUGHT,
                                         baseline=DEMO_BASELINE, out=surfaces)
        spring = workflows.springflow(store, "SP-1", index=DEMO_INDEX_ZONE, out=surfaces)
        ranked = workflows.springflow(store, "SP-1", out=out / "springflow_ranked", figure=False)
        scenario = workflows.drawdown_scenario(store, "ULS", days=365, storativity=0.002, out=surfaces,
                                               new_wells=[("PROPOSED-1", 620_000.0, 4_106_000.0, 3000.0)],
                                               name="proposed-wellfield")
        map_path = workflows.build_map(store, unit="ULS", out=out / "map.html", surfaces=surfaces)
        layer_files = workflows.export_layers(store, out=out, surfaces=surfaces)
        figure_files = workflows.make_figures(store, out=out / "figures", surfaces=surfaces, board_map=True,
                                              unit="ULS")
        # the spring drains' conductance is invented for the demo (m2/d); a modeller sets it from the spring
        model = workflows.model_grid(store, cell=250.0, out=out / "model" / "zephyrine_model.nc",
                                     layers=["CAP", "ULS", "SHL", "LCL"], surfaces=surfaces,
                                     mf6=out / "model" / "mf6", spring_conductance=DEMO_SPRING_CONDUCTANCE)
    finally:
        store.close()
    echo("\nUnit statistics (K in m/d, every test counts once):")
    echo(table.to_string(index=False, float_format=lambda v: f"{v:.4g}"))
    echo(f"\n{len(findings)} data-quality findings in {out / 'check.csv'}")
    echo(f"\nVertical head differences at multi-zone wells: {out / 'verticals.csv'}")
    echo(f"Surfaces, gradients and flow arrows in {out / 'surfaces'}:")
    for line in written:
        echo(line)
    echo(f"\nPathways from the recharge area (ULS, effective porosity {DEMO_POROSITY}):")
    echo(fwd["table"].to_string(index=False, float_format=lambda v: f"{v:.3g}"))
    echo("Contributing areas of the springs:")
    echo(bwd["table"].to_string(index=False, float_format=lambda v: f"{v:.3g}"))
    echo(f"Caution: {workflows.KARST_WARNING}")
    echo(f"\nPumping scenario (ULS, 365 d, S = 0.002, one proposed well of 3000 m3/d): largest drawdown "
         f"{scenario['max_drawdown']:.2f} m; {len(scenario['impacts'])} springs/zones lose more than "
         f"{scenario['threshold']} m -> {scenario['files']['impacts']}")
    echo(f"\nHydrographs (drought {DEMO_DROUGHT} and baseline {DEMO_BASELINE} shaded): "
         f"{len(hydro['files'])} files in {out / 'hydrographs'}")
    echo(f"Drought head change (ULS, {DEMO_DROUGHT} minus {DEMO_BASELINE}): {change['n_points']} wells -> "
         f"{Path(change['files']['raster']).name}")
    h0 = spring["cease_flow_head"]
    echo(f"\nSpring SP-1 against the head of {DEMO_INDEX_ZONE} ({spring['model']} fit): cease-flow head "
         f"{h0['value']:.2f} m (95 % {h0['low']:.2f} to {h0['high']:.2f} m); trigger levels: "
         + "; ".join(f"{lv['percent']:g} % of median discharge at {lv['head']:.2f} m "
                     f"({lv['low']:.2f} to {lv['high']:.2f})" for lv in spring["trigger_levels"]))
    echo(f"  without an index zone the best-ranked candidate is {ranked['index']['well_id']}/"
         f"{ranked['index']['zone_id']} -> {spring['files']['sidecar']}")
    effects = scenario.get("spring_effects")
    if effects is not None and len(effects):
        for row in pd.DataFrame(effects).to_dict(orient="records"):
            echo(f"  scenario proposed-wellfield: drawdown {row['drawdown_at_index']:.2f} {row['length_unit']} at "
                 f"{row['index_well']}/{row['index_zone']} takes {row['discharge_change']:.0f} "
                 f"({row['discharge_change_low']:.0f} to {row['discharge_change_high']:.0f}) {row['rate_unit']} "
                 f"from {row['spring_id']} ({row['change_percent']:.1f} %); its discharge over its contributing "
                 f"area equals {row['equivalent_recharge_before']:.3g} {row['recharge_unit']} of recharge")
    echo(f"Caution: {workflows.CAUTION}")
    echo(f"\nWeb map (offline, self-contained): {map_path}")
    echo(f"GIS layers: {layer_files['gpkg']} and {out / 'geojson'}")
    echo(f"Figures: {len(figure_files)} PNG/SVG files in {out / 'figures'}")
    nl, nr, nc = model["shape"]
    echo(f"Model grid: {nl} layers x {nr} rows x {nc} columns -> {model['files']['netcdf']} "
         f"(arrays and manifest beside it)")
    m6 = model["mf6"]
    echo(f"MODFLOW 6 simulation (steady state, not run here): {m6['folder']} - {len(m6['wells'])} pumped zones "
         f"in WEL, {len(m6['springs'])} springs in DRN (conductance {m6['spring_conductance']:g} "
         f"{m6['spring_conductance_unit']}, invented for the demo)")
    echo(f"store: {store_path}")
    files = {"store": str(store_path), "check": str(out / "check.csv"), "verticals": str(out / "verticals.csv"),
             "surfaces": str(surfaces), "map": str(map_path), "layers": str(layer_files["gpkg"]),
             "figures": [str(f) for f in figure_files], "model_grid": str(model["files"]["netcdf"]),
             "mf6": str(m6["folder"])}
    return {"store": str(store_path), "stats": stats_rows, "findings": findings, "files": files}
