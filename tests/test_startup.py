"""Start-up: --help loads no heavy library, the choices shown by --help match the library's, and importing the
figure writers leaves the user's matplotlib backend alone.

Each check runs in a fresh interpreter (subprocess), since this test process has long imported everything.
"""

import json
import subprocess
import sys
import textwrap

import pytest

from hydroatlas import cli

# the libraries that made `hydroatlas --help` take seconds; none may be imported before a command runs
HEAVY = ("numba", "numpy", "pandas", "geopandas", "rasterio", "pyogrio", "matplotlib", "folium", "scipy",
         "shapely", "pyproj", "xarray", "netCDF4", "tqdm", "hydroatlas.workflows", "hydroatlas.store")


def _run(code: str) -> subprocess.CompletedProcess:
    res = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    return res


def _loaded_after(code: str) -> list[str]:
    """Heavy modules in sys.modules after running ``code`` in a fresh interpreter."""
    res = _run(textwrap.dedent(code) + textwrap.dedent(f"""
        import json, sys
        heavy = {HEAVY!r}
        print(json.dumps(sorted(m for m in sys.modules if any(m == h or m.startswith(h + ".") for h in heavy))))
        """))
    return json.loads(res.stdout.strip().splitlines()[-1])


def test_help_of_the_program_and_of_every_command_imports_no_heavy_library():
    """`hydroatlas --help` and `hydroatlas COMMAND --help` for every command, as the console script runs them."""
    code = """
        import contextlib, io
        from hydroatlas.cli import main
        commands = [[]] + [[name] for name in main.commands]
        for args in commands:
            with contextlib.redirect_stdout(io.StringIO()) as text:
                try:
                    main(args + ["--help"], prog_name="hydroatlas")
                except SystemExit as exc:
                    assert exc.code == 0, (args, exc.code)
            assert "Usage: hydroatlas" in text.getvalue(), args
        """
    assert _loaded_after(code) == []


def test_every_command_was_asked_for_its_help():
    # the loop above takes its commands from the group; make sure the group is the full program
    assert {"init", "import", "check", "stats", "surface", "paths", "drawdown", "grid", "map", "demo"} <= set(
        cli.main.commands)


def test_import_hydroatlas_is_light_and_open_store_still_imports():
    assert _loaded_after("import hydroatlas") == []
    loaded = _loaded_after("from hydroatlas import open_store, create_store\nassert callable(open_store)")
    assert "hydroatlas.store" in loaded and "pandas" in loaded


def test_unknown_attribute_of_the_package_is_an_attribute_error():
    import hydroatlas

    with pytest.raises(AttributeError, match="no attribute 'not_a_name'"):
        hydroatlas.not_a_name  # noqa: B018


def test_a_command_still_reaches_the_library(runner, mini_store):
    """The lazy imports resolve when a command runs (pandas and the workflows behind `check`)."""
    res = runner.invoke(cli.main, ["check", str(mini_store), "--format", "json"], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    assert isinstance(json.loads(res.stdout), list)


@pytest.mark.parametrize("shown, library", [
    ("KINDS", ("hydroatlas.store.importers", "KINDS")),
    ("PER_CHOICES", ("hydroatlas.stats", "PER_CHOICES")),
    ("SURFACE_QUANTITIES", ("hydroatlas.workflows.surfaces", "QUANTITIES")),
    ("SURFACE_METHODS", ("hydroatlas.workflows.surfaces", "METHODS")),
    ("SLUG_METHODS", ("hydroatlas.workflows.slug_jobs", "SLUG_METHODS")),
])
def test_choices_written_in_the_cli_equal_the_library_ones(shown, library):
    """The CLI spells its choices out so that --help needs no library import; they must not drift."""
    import importlib

    module, name = library
    assert tuple(getattr(cli, shown)) == tuple(getattr(importlib.import_module(module), name))


def test_figures_leave_the_matplotlib_backend_and_pyplot_alone(tmp_path):
    """Importing hydroatlas.export.figures and drawing a figure: the backend chosen before is still the backend,
    and pyplot (with its global figure registry) is never imported."""
    code = f"""
        import sys
        import matplotlib
        matplotlib.use("svg")
        before = matplotlib.get_backend()
        from hydroatlas.export import figures
        paths = figures.cross_validation({str(tmp_path / "cv")!r}, [1.0, 2.0, 3.0], [1.1, 1.9, 3.2],
                                         std=[0.1, 0.2, 0.1], label="head", unit="m")
        assert all(p.stat().st_size > 0 for p in paths), paths
        print(before, matplotlib.get_backend(), "matplotlib.pyplot" in sys.modules)
        """
    before, after, pyplot_loaded = _run(code).stdout.split()
    assert before == "svg" and after == "svg"
    assert pyplot_loaded == "False"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cv.png", "cv.svg"]


def test_figures_module_calls_no_backend_switch():
    import inspect

    from hydroatlas.export import figures

    source = inspect.getsource(figures)
    assert "matplotlib.use(" not in source
    assert "import matplotlib.pyplot" not in source and "from matplotlib import pyplot" not in source
