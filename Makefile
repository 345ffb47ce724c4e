# Two commands do everything on a fresh clone: `make demo` and `make test`.
# Each creates the virtual environment and installs the package on first use.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.geothermmap-installed

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/geothermmap demo -o geothermmap-out/demo

test: $(STAMP)
	$(BIN)/python -m pytest -q -n 2 tests

lint: $(STAMP)
	$(BIN)/ruff check geothermmap tests benchmarks

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_pipeline.py --machinery

clean:
	rm -rf geothermmap-out .pytest_cache
