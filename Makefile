# Two commands on a fresh machine with Python 3.11+:  `make run`  and  `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-stamp
# Python's default: write bytecode caches (pytest keeps the modules it rewrites there too).
# Without them each test process compiles ~2,000 modules again: ~12 s of CPU per process.
export PYTHONDONTWRITEBYTECODE :=

.PHONY: install migrate demo run test test-postgres lint format bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet --disable-pip-version-check uv
	$(BIN)/uv pip install --quiet --python $(BIN)/python -e '.[dev]'
	@touch $(STAMP)

install: $(STAMP)

migrate: install
	$(BIN)/seepline migrate

demo: migrate
	$(BIN)/seepline load-demo

run: demo
	$(BIN)/seepline serve

# The suite in parallel (pytest-xdist: one process per core, a database each), then the
# browser tests on their own so Chromium does not compete with it (two at a time: they mostly
# wait on the browser). PYTEST_ARGS go to both (exit status 5, "no tests selected", is fine
# when they name tests of one group only).
TEST_WORKERS ?= auto
BROWSER_WORKERS ?= 2
PYTEST_ARGS ?=
test: install
	$(BIN)/pytest -n $(TEST_WORKERS) -m "not browser" $(PYTEST_ARGS) || [ $$? -eq 5 ]
	$(BIN)/pytest -n $(BROWSER_WORKERS) -m browser $(PYTEST_ARGS) || [ $$? -eq 5 ]

# The same suite on PostgreSQL (starts a throwaway server when none answers on 5432).
test-postgres: install
	bash .ci/postgres-suite

lint: install
	$(BIN)/ruff check .
	$(BIN)/ruff format --check .
	$(BIN)/mypy
	$(BIN)/lint-imports

format: install
	$(BIN)/ruff format .
	$(BIN)/ruff check --fix .

clean:
	rm -rf $(VENV) var test-artifacts .pytest_cache .mypy_cache .ruff_cache
