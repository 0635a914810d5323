# LossLedger: `make demo` to try it, `make test` to check it. Needs only Python 3.11+.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed-stamp

.PHONY: install demo serve test test-fast lint bench loadtest migrate clean

$(STAMP): pyproject.toml
	@$(PYTHON) -c 'import sys; sys.exit(0 if sys.version_info >= (3, 11) else "LossLedger needs Python 3.11 or newer")'
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	@touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/lossledger serve --demo

serve: $(STAMP)
	$(VENV)/bin/lossledger serve

migrate: $(STAMP)
	$(VENV)/bin/lossledger db upgrade

# Lint (ruff) and types (mypy on domain/) first: a finding fails the build before the suite runs.
lint: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/mypy

test: lint
	$(PY) -m pytest

test-fast: $(STAMP)
	$(PY) -m pytest tests/unit -q

# Speed and memory targets, measured side by side in one run (never as timed tests).
bench: $(STAMP)
	$(PY) -m bench.bench_fleet
	$(PY) -m bench.bench_fleet_import
	$(PY) -m bench.bench_monte_carlo

# Several workers on PostgreSQL under wrk (Debian packages postgresql and wrk).
loadtest: $(STAMP)
	$(PY) -m bench.loadtest

clean:
	rm -rf $(VENV) .pytest_cache .hypothesis
