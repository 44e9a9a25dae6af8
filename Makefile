# The two README commands: `make demo` (dashboard on the bundled demo runs) and
# `make test` (lint, types, tests). Both set up everything they need first.
VENV   ?= .venv
PY     := $(VENV)/bin/python
DATA   ?= outrigger-data
PYTHON ?= python3

.PHONY: demo test lint bench chromium wheel-smoke

$(VENV)/.runtime: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e .
	touch $@

$(VENV)/.testdeps: $(VENV)/.runtime
	$(PY) -m pip install -q -e '.[test]'
	touch $@

demo: $(VENV)/.runtime
	$(VENV)/bin/outrigger demo --data $(DATA)

# Debian's Chromium for the browser tests; installed only when missing.
chromium:
	@command -v chromium >/dev/null 2>&1 || { \
	  if [ "$$(id -u)" = 0 ]; then apt-get update -q && apt-get install -y -q chromium; \
	  else sudo apt-get update -q && sudo apt-get install -y -q chromium; fi; }

lint: $(VENV)/.testdeps
	$(VENV)/bin/ruff check analysis server tests benchmarks
	$(VENV)/bin/ruff format --check analysis server tests benchmarks
	$(VENV)/bin/mypy

# Build the wheel and sdist, install the wheel in a fresh venv outside the checkout,
# and try the installed tool (demo runs, serve, a page script, /api/runs).
wheel-smoke: $(VENV)/.testdeps
	$(PY) tests/wheel_smoke.py

test: $(VENV)/.testdeps chromium lint wheel-smoke
	$(VENV)/bin/pytest

bench: $(VENV)/.runtime
	$(PY) benchmarks/run.py
