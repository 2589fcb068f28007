# Two entry points on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e '.[test]'
	# GDAL's GeoPackage validator (pure Python; its declared dependency on the GDAL bindings is not needed)
	$(BIN)/python -m pip install --quiet --no-deps 'gdal-utils==3.13.3.0'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/hydroatlas demo --out demo_out

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_store.py

clean:
	rm -rf $(VENV) demo_out build *.egg-info
