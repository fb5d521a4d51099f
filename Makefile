# Two entry points for a fresh machine with Python 3.11: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test setup clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test,dask]'
	touch $(STAMP)

setup: $(STAMP)

demo: $(STAMP)
	$(BIN)/lagdesk demo

test: $(STAMP)
	$(BIN)/python -m pytest -m "slow or not slow" --durations=25

clean:
	rm -rf $(VENV) *.egg-info
