# The few commands people need. `make demo` and `make test` work on a fresh machine.
PYTHON ?= python3.11
VENV := .venv
BIN := $(VENV)/bin
HOST ?= 127.0.0.1:8000

.PHONY: venv demo test lint format migrations-check bench clean

$(BIN)/activate: pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[dev]'
	touch $(BIN)/activate

venv: $(BIN)/activate

## Install, migrate the embedded SQLite database, load the invented demo sites, serve the pages on 127.0.0.1:8000.
demo: venv
	$(BIN)/python manage.py migrate --noinput
	$(BIN)/python manage.py load_demo
	@echo "Planner pages: open http://$(HOST)/ and log in as demo / demo"
	$(BIN)/python manage.py runserver $(HOST)

## Install and run the tests (the database is DATABASE_URL's, SQLite when unset).
test: venv
	$(BIN)/pytest $(PYTEST_ARGS)

## ruff (style), lint-imports (the layering contracts in pyproject.toml) and mypy (types).
lint: venv
	$(BIN)/ruff check .
	$(BIN)/ruff format --check .
	$(BIN)/lint-imports
	$(BIN)/mypy

format: venv
	$(BIN)/ruff format .
	$(BIN)/ruff check --fix .

migrations-check: venv
	$(BIN)/python manage.py makemigrations --check --dry-run

bench: venv
	$(BIN)/python -m analysis.bench.engine

clean:
	rm -rf $(VENV) var .pytest_cache .ruff_cache .mypy_cache .import_linter_cache .hypothesis
