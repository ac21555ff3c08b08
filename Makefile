# Two commands on a fresh machine with Python 3.11+:  `make run`  and  `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-stamp

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

test: install
	$(BIN)/pytest

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
