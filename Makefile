# Tracedesk developer and user entry points. `make run` and `make test` are the two README commands.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
PYTEST_ARGS ?=

.PHONY: run test check lint typecheck layers unit bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(VENV)/.runtime-installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(VENV)/.test-installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@ $(VENV)/.runtime-installed

## Install into .venv and run the product on the embedded default (SQLite + local files); on the first run it
## loads the demo archive and prints the passwords once (`tracedesk demo --remove` removes the demo).
run: $(VENV)/.runtime-installed
	$(BIN)/tracedesk serve --demo

## Install the test dependencies and run the whole suite: lint, types, layering, tests.
test: $(VENV)/.test-installed check unit

check: lint typecheck layers

lint:
	$(BIN)/ruff check server tests bench migrations
	$(BIN)/ruff format --check server tests bench migrations

typecheck:
	$(BIN)/mypy

layers:
	$(BIN)/lint-imports

# --dist loadgroup: the browser tests (one xdist group) share one worker, one server and one Chromium.
unit:
	$(BIN)/pytest -n 2 --dist loadgroup $(PYTEST_ARGS)

bench: $(VENV)/.test-installed
	for script in bench/bench_*.py; do name=$$(basename $$script .py); echo "== $$name"; \
		$(BIN)/python -m bench.$$name || exit 1; done

clean:
	rm -rf $(VENV) .mypy_cache .ruff_cache .pytest_cache
