# Two commands set everything up on a fresh machine with Python 3.11 and make:
#   make demo   - create .venv, install cluttersim, run the built-in demo
#   make test   - install the test extras into .venv and run the whole test suite
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin

.PHONY: demo test bench install clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(VENV)/.installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test,dask,pds,segy]'
	touch $@ $(VENV)/.installed

install: $(VENV)/.installed

demo: $(VENV)/.installed
	$(BIN)/cluttersim demo

test: $(VENV)/.installed-test
	bash .ci/install-browser
	bash .ci/install-proj-data
	$(BIN)/python -m pytest

bench: $(VENV)/.installed
	$(BIN)/python benchmarks/bench_simulate.py
	$(BIN)/python benchmarks/bench_survey.py
	$(BIN)/python benchmarks/bench_levels.py
	$(BIN)/python benchmarks/bench_products.py

clean:
	rm -rf $(VENV) demo_output .pytest_cache
