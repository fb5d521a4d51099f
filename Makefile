# Two entry points for a fresh machine with Python 3.11: `make demo` and `make test`; `make lint`
# (ruff and mypy, configured in pyproject.toml) runs in CI before the tests.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test lint setup clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test,dask]'
	touch $(STAMP)

setup: $(STAMP)

demo: $(STAMP)
	$(BIN)/lagdesk demo

lint: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/mypy

test: $(STAMP)
	$(BIN)/python -m pytest -m "slow or not slow" --durations=25

clean:
	rm -rf $(VENV) *.egg-info
