# Two set-up commands: `make demo` and `make test`. Both build the local virtual environment first.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin

.PHONY: demo test test-loaded bench clean

$(BIN)/railtap: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(VENV)/.test-extras: $(BIN)/railtap
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@

demo: $(BIN)/railtap
	$(BIN)/railtap demo

test: $(VENV)/.test-extras
	$(BIN)/ruff check logger tests
	$(BIN)/python -m pytest

test-loaded: $(VENV)/.test-extras
	$(BIN)/python tests/bench/suite_under_load.py 5

bench: $(VENV)/.test-extras
	$(BIN)/python tests/bench/bench_ingest.py

clean:
	rm -rf $(VENV) build *.egg-info
