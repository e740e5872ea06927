# The README's two commands. Each builds its own virtual environment from nothing.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin

.PHONY: demo test setup bench

$(BIN)/foldsift: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@

setup: $(BIN)/foldsift

# Open the review app on the demo data.
demo: setup
	$(BIN)/foldsift review

# Lint, format check, type check and the whole test suite; "no tests collected" fails.
test: setup
	$(BIN)/ruff check stats tui demo tests
	$(BIN)/ruff format --check stats tui demo tests
	$(BIN)/mypy --strict stats
	$(BIN)/mypy tui demo
	$(BIN)/python -m pytest -q -p no:cacheprovider tests

bench: setup
	$(BIN)/python tests/bench_scan.py
	$(BIN)/python tests/bench_list.py
