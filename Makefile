# The two README commands: `make demo` (dashboard on the bundled demo runs) and
# `make test` (lint, types, tests). Both set up everything they need first.
VENV   ?= .venv
PY     := $(VENV)/bin/python
DATA   ?= outrigger-data
PYTHON ?= python3
# The browser tests drive Debian's Chromium at this path (tests/web/live_server.py).
CHROMIUM := /usr/bin/chromium
# Length of the generated log in `make bench` (the scripts' own default is 60 min).
BENCH_MINUTES ?= 2

.PHONY: demo test lint bench chromium mutate wheel-smoke

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

# Debian's Chromium for the browser tests, at the path the tests use (not PATH): skipped
# when it works, else chromium alone with --no-install-recommends and no upgrade of
# installed packages (tools/install_chromium.sh).
chromium:
	@CHROMIUM=$(CHROMIUM) sh tools/install_chromium.sh
	@test -x $(CHROMIUM) || { echo "$(CHROMIUM) is still missing after installing Debian's \
	chromium package; the browser tests need it at that path." >&2; exit 1; }

lint: $(VENV)/.testdeps
	$(VENV)/bin/ruff check analysis server tests benchmarks
	$(VENV)/bin/ruff format --check analysis server tests benchmarks
	$(VENV)/bin/mypy

# Build the wheel and sdist, install the wheel in a fresh venv outside the checkout,
# and try the installed tool (demo runs, serve, a page script, /api/runs).
wheel-smoke: $(VENV)/.testdeps
	$(PY) tests/wheel_smoke.py

# CI=true makes a missing Chromium fail the browser tests instead of skipping them.
test: $(VENV)/.testdeps chromium lint wheel-smoke
	CI=true $(VENV)/bin/pytest

# The three benchmarks on a short generated log (printed figures, not tests);
# `make bench BENCH_MINUTES=60` for the full one-hour size.
bench: $(VENV)/.testdeps chromium
	$(PY) benchmarks/bench_ingest.py --minutes $(BENCH_MINUTES)
	$(PY) benchmarks/bench_analysis.py --minutes $(BENCH_MINUTES)
	$(PY) benchmarks/bench_dashboard.py --minutes $(BENCH_MINUTES) --fresh

# Mutation check of the five detector modules (about three minutes); fails if one survives.
mutate: $(VENV)/.testdeps
	$(PY) benchmarks/mutate.py
