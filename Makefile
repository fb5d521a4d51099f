# Two entry points for a fresh machine with Python 3.11: `make demo` and `make test`; `make lint`
# (ruff and mypy, configured in pyproject.toml) runs in CI before the tests.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
# The demo needs the package alone; the tests and linters its test and Dask extras as well.
BASE := $(VENV)/.installed-base
STAMP := $(VENV)/.installed

.PHONY: demo test lint setup clean

$(BASE): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e .
	touch $(BASE)

$(STAMP): $(BASE)
	$(BIN)/pip install --quiet -e '.[test,dask]'
	touch $(STAMP)

setup: $(STAMP)

# Ctrl-C stops the demo's server and make exits 0. On a terminal the server runs as a job of its
# own (set -m, then fg): the terminal's interrupt then reaches the server alone, where make itself
# would otherwise die of it and report an error. DEMO_ARGS passes options (--port 8001, --no-browser).
demo: $(BASE)
	@if [ -t 0 ]; then set -m; $(BIN)/lagdesk demo $(DEMO_ARGS) & fg >/dev/null; else $(BIN)/lagdesk demo $(DEMO_ARGS); fi

lint: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/mypy

test: $(STAMP)
	$(BIN)/python -m pytest -m "slow or not slow" --durations=25

clean:
	rm -rf $(VENV) *.egg-info
