# The two README commands: `make demo` (dashboard on the bundled demo runs) and
# `make test` (lint, types, tests). Both set up everything they need first.
VENV   ?= .venv
PY     := $(VENV)/bin/python
DATA   ?= outrigger-data
PYTHON ?= python3

.PHONY: demo test lint bench chromium

$(VENV)/.runtime: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e .
	touch $@

$(VENV)/.testdeps: $(VENV)/.runtime
	$(PY) -m pip install -q -e '.[test]'
	touch $@

demo: $(VENV)/.runtime
	$(VENV)/bin/outrigger demo --data $(DATA) $(if $(PORT),--port $(PORT))

# Debian's Chromium for the browser tests: skipped when /usr/bin/chromium works, else
# chromium alone with --no-install-recommends and no upgrade of installed packages.
chromium:
	@sh tools/install_chromium.sh

lint: $(VENV)/.testdeps
	$(VENV)/bin/ruff check analysis server tests benchmarks
	$(VENV)/bin/ruff format --check analysis server tests benchmarks
	$(VENV)/bin/mypy

test: $(VENV)/.testdeps chromium lint
	$(VENV)/bin/pytest

bench: $(VENV)/.runtime
	$(PY) benchmarks/run.py
