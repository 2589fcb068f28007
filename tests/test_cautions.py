"""The caution texts (SPEC section 7) are written once, in hydroatlas/cautions.py, and every product that
carries one carries exactly that text: GeoTIFF tags, JSON sidecars, the NetCDF ``comment`` attribute and the
model manifest, the GeoPackage layer descriptions, the web map (HTML-escaped), the figures' footer, and the
``--help`` of the commands that make surfaces, pathways, drawdown, maps and model grids.

The products are made on the invented planar district of tests/test_cli_json.py.
"""

from __future__ import annotations

import json
import re
import sqlite3
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
import rasterio
import xarray as xr
from click.testing import CliRunner

import hydroatlas
from hydroatlas import cautions
from hydroatlas.cautions import CAUTION, FIGURE_FOOTER, KARST_WARNING, caution_text, caution_texts, help_paragraph
from hydroatlas.cli import main
from hydroatlas.errors import ParameterError
from hydroatlas.export.webmap import safe_text

from conftest import cli
from test_cli_json import X0, Y0, build_district, run_json

PACKAGE = Path(hydroatlas.__file__).parent
README = PACKAGE.parent / "README.md"


def one_line(text: str) -> str:
    return " ".join(text.split())


# -- written once ------------------------------------------------------------------------------------------------
def test_the_caution_is_written_in_one_module_only():
    """No other source file of the package spells one of the caution texts out (a grep-like scan of every .py
    file for a phrase of each text; a product may add its own sentence after them, as springflow does)."""
    phrases = ["screening-level", "not see conduits, faults", "upper bounds in karst", "Theis assumes",
               "see the cautions in the README"]
    for text, phrase in zip([CAUTION, cautions.SURFACE_CAUTION, KARST_WARNING, cautions.THEIS_CAUTION,
                             FIGURE_FOOTER], phrases):
        assert phrase.lower() in text.lower()
    pattern = re.compile("|".join(map(re.escape, phrases)), re.I)
    found = [str(p.relative_to(PACKAGE)) for p in PACKAGE.rglob("*.py")
             if p.name != "cautions.py" and pattern.search(p.read_text(encoding="utf-8"))]
    assert found == []
    assert pattern.search(Path(cautions.__file__).read_text(encoding="utf-8"))


def test_readme_carries_the_caution():
    assert CAUTION in one_line(README.read_text(encoding="utf-8"))


def test_caution_texts_per_product():
    for product in cautions.PRODUCTS:
        texts = caution_texts(product)
        assert texts[0] == CAUTION and caution_text(product) == " ".join(texts)
    assert caution_text() == CAUTION
    assert KARST_WARNING in caution_text("pathways") and KARST_WARNING in caution_text("map")
    assert "Theis" in caution_text("drawdown") and "Theis" not in caution_text("surface")
    with pytest.raises(ParameterError, match=r"product= must be one of general, surface") as info:
        caution_text("bridge")
    assert info.value.param == "product"


# -- --help ------------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("command, product", [("surface", "surface"), ("paths", "pathways"),
                                              ("drawdown", "drawdown"), ("map", "map"), ("grid", "model_grid")])
def test_help_carries_the_caution(runner, command, product):
    res = cli(runner, command, "--help")
    assert res.exit_code == 0
    text = one_line(res.output)
    assert one_line(help_paragraph(product)) in text
    # the caution comes before the example, and the example is still there where the command has one
    if "Example:" in text:
        assert text.index("Caution:") < text.index("Example:")


# -- products ----------------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def made(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cautions")
    runner = CliRunner()
    store, _, _ = build_district(folder, runner)
    out = folder / "out"
    docs = {"surface": run_json(runner, "surface", store, "--unit", "AQ", "--cell", 100, "--out", out)}
    res = cli(runner, "paths", store, "--unit", "AQ", "--porosity", 0.05, "--capture-radius", 200, "--out", out)
    assert res.exit_code == 0, res.output
    docs["paths_table_output"] = res.stdout
    docs["drawdown"] = run_json(runner, "drawdown", store, "--unit", "AQ", "--days", 30, "-S", 1e-3, "-T", 400,
                                "--new-well", f"P1,{X0 + 3000},{Y0 + 2000},1000", "--out", out)
    docs["map"] = run_json(runner, "map", store, "--unit", "AQ", "--out", folder / "map.html")
    docs["figures"] = run_json(runner, "figures", store, "--out", folder / "figures")
    docs["grid"] = run_json(runner, "grid", store, "--cell", 500, "--out", folder / "model" / "m.nc")
    return folder, out, docs


def test_surface_and_gradient_rasters_and_sidecar(made):
    _, out, docs = made
    files = docs["surface"]["files"]
    with rasterio.open(files["raster"]) as r:
        assert r.tags()["caution"] == caution_text("surface")
    with rasterio.open(files["gradient"]) as r:
        assert r.tags()["caution"] == caution_text("gradient")
    assert json.loads((out / "AQ_head.json").read_text())["caution"] == caution_text("surface")
    assert docs["surface"]["caution"] == caution_text("surface")


def test_pathways_sidecar_layers_and_terminal(made):
    _, out, docs = made
    side = json.loads((out / "AQ_pathways.json").read_text())
    assert side["caution"] == caution_text("pathways") and side["karst_warning"] == KARST_WARNING
    with sqlite3.connect(out / "layers.gpkg") as con:  # GeoPackage layer descriptions (gpkg_contents)
        described = dict(con.execute("SELECT table_name, description FROM gpkg_contents").fetchall())
    assert described["pathlines"] == KARST_WARNING
    assert f"Caution: {KARST_WARNING}" in docs["paths_table_output"]


def test_drawdown_rasters_and_sidecar(made):
    _, out, docs = made
    doc = docs["drawdown"]
    assert doc["caution"] == caution_text("drawdown")
    for kind in ("drawdown", "head"):
        with rasterio.open(doc["files"][kind]) as r:
            assert r.tags()["caution"] == caution_text("drawdown"), kind
    assert json.loads((out / "AQ_drawdown.json").read_text())["caution"] == caution_text("drawdown")


def test_model_grid_netcdf_and_manifest(made):
    folder, _, docs = made
    with xr.open_dataset(folder / "model" / "m.nc") as ds:
        assert ds.attrs["comment"] == caution_text("model_grid")
    manifests = list((folder / "model").rglob("manifest.json"))
    assert manifests, docs["grid"]["files"]
    assert json.loads(manifests[0].read_text())["caution"] == caution_text("model_grid")


def test_web_map_carries_every_caution_escaped(made):
    folder, _, _ = made
    page = (folder / "map.html").read_text(encoding="utf-8")
    for text in caution_texts("map"):
        assert safe_text(text) in page


def test_figures_carry_the_footer(made):
    _, _, docs = made
    svgs = [Path(f) for f in docs["figures"]["files"] if f.endswith(".svg")]
    assert svgs
    for path in svgs:
        root = ET.parse(path).getroot()
        text = "\n".join(t for el in root.iter() if el.tag.endswith("text") for t in el.itertext())
        assert FIGURE_FOOTER in text, path.name


def test_every_command_making_a_product_is_covered():
    """The commands whose --help carries a caution are the ones that make products with one (no command
    is forgotten when one is added: a new product command must be added to the table above)."""
    with_caution = {name for name, command in main.commands.items() if "Caution:" in (command.help or "")}
    assert with_caution >= {"surface", "paths", "drawdown", "map", "grid"}
