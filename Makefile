# Developer entry points. `make test` is what CI runs (through .ci/run).
#   make install   create .venv and install the package (editable) with the test extra, and compile the
#                  solver's kernel into its cache (about 20 s, once); redone only when pyproject.toml changes
#                  (stamp file .venv/.installed)
#   make test      lint (ruff) and the test suite
#   make run       start JupyterLab on the notebooks (127.0.0.1, random token): make run PORT=8890
#   make bench     run the benchmark scripts in tests/benchmarks/ (printed ratios, not timed tests)

SHELL := /bin/bash
.SHELLFLAGS := -euo pipefail -c
.DEFAULT_GOAL := test

PYTHON3 ?= python3
VENV := .venv
PY := $(VENV)/bin/python
UV := $(VENV)/bin/uv
STAMP := $(VENV)/.installed

# Never let uv download an interpreter: use the one the venv was made from.
export UV_PYTHON_DOWNLOADS := never
# The shell may set PYTHONDONTWRITEBYTECODE; without bytecode every import (and every kernel start)
# recompiles, so each recipe runs with it removed from the environment.
RUN := env -u PYTHONDONTWRITEBYTECODE

.PHONY: install test run bench

install: $(STAMP)

$(STAMP): pyproject.toml
	test -x $(PY) || $(RUN) $(PYTHON3) -m venv $(VENV)
	test -x $(UV) || $(RUN) $(PY) -m pip install --quiet uv
	$(RUN) $(UV) pip install --python $(PY) --config-settings editable_mode=compat -e '.[test]'
	$(RUN) $(PY) -m workbench.chemistry.compiled_engine
	touch $@

test: install
	$(RUN) $(VENV)/bin/ruff check workbench tests
	$(RUN) $(PY) -m pytest -q

run: install
	$(RUN) $(PY) -m workbench lab $(if $(PORT),--port $(PORT))

# the cases, their targets and how each is timed: tests/benchmarks/__main__.py
bench: install
	$(RUN) $(PY) -m tests.benchmarks
