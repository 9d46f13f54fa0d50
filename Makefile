# Developer entry points. `make test` is what CI runs (through .ci/run).
#   make install   create .venv, install the package (editable) with its runtime dependencies only, and compile
#                  the solver's kernel into numba's cache (a step of its own, with its time; about 30-60 s, once)
#   make run       make install, then start JupyterLab on the notebooks (127.0.0.1, random token):
#                  make run PORT=8890
#   make test      make install plus the test extra, then lint (ruff) and the whole test suite on both cores
#   make check     the same lint and the quick part of the suite (no property, widget, notebook or browser
#                  tests): for editing
#   make bench     the benchmark scripts in tests/benchmarks/ (printed figures, not timed tests)
# Installs are redone only when pyproject.toml changes (stamp files in .venv/), the kernel's compile only when
# its source changes.

SHELL := /bin/bash
.SHELLFLAGS := -euo pipefail -c
.DEFAULT_GOAL := test

PYTHON3 ?= python3
VENV := .venv
PY := $(VENV)/bin/python
UV := $(VENV)/bin/uv
RUNTIME := $(VENV)/.installed-runtime
TESTING := $(VENV)/.installed-test
KERNEL := $(VENV)/.kernel-compiled
KERNEL_SOURCE := workbench/chemistry/kernel.py
# two pytest workers (the CI machine and laptops have two cores); tests of one file stay in one worker, so a
# module's shared fixtures are made once
WORKERS ?= 2

# Never let uv download an interpreter: use the one the venv was made from.
export UV_PYTHON_DOWNLOADS := never
# The shell may set PYTHONDONTWRITEBYTECODE; without bytecode every import (and every kernel start)
# recompiles, so each recipe runs with it removed from the environment.
RUN := env -u PYTHONDONTWRITEBYTECODE

.PHONY: install test check run bench

install: $(KERNEL)

$(RUNTIME): pyproject.toml
	test -x $(PY) || $(RUN) $(PYTHON3) -m venv $(VENV)
	test -x $(UV) || $(RUN) $(PY) -m pip install --quiet uv
	$(RUN) $(UV) pip install --python $(PY) --config-settings editable_mode=compat -e .
	touch $@

$(TESTING): $(RUNTIME)
	$(RUN) $(UV) pip install --python $(PY) --config-settings editable_mode=compat -e '.[test]'
	touch $@

$(KERNEL): $(RUNTIME) $(KERNEL_SOURCE)
	@echo "Compiling the solver's kernel (numba; once per installation, about 30-60 s on two cores)..."
	$(RUN) $(PY) -m workbench.chemistry.compiled_engine
	touch $@

test: $(KERNEL) $(TESTING)
	$(RUN) $(VENV)/bin/ruff check workbench tests
	$(RUN) $(PY) -m pytest -q -n $(WORKERS) --dist loadfile

check: $(KERNEL) $(TESTING)
	$(RUN) $(VENV)/bin/ruff check workbench tests
	$(RUN) $(PY) -m pytest -q -n $(WORKERS) --dist loadfile -m "not slow and not browser" \
		--ignore=tests/test_notebooks.py --ignore=tests/test_export.py

run: $(KERNEL)
	$(RUN) $(PY) -m workbench lab $(if $(PORT),--port $(PORT))

# the cases, their targets and how each is timed: tests/benchmarks/__main__.py
bench: $(KERNEL) $(TESTING)
	$(RUN) $(PY) -m tests.benchmarks
