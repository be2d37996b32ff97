# closecall — developer and quick-start targets. Each target builds its own virtual environment.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test lint typecheck unit bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[dev]'
	touch $(STAMP)

demo: $(STAMP)  ## open the review screen on the bundled demo study
	$(BIN)/closecall review --demo

test: $(STAMP) lint typecheck unit  ## the whole suite: ruff, mypy, pytest

lint: $(STAMP)
	$(BIN)/ruff check src tests benchmarks

typecheck: $(STAMP)
	$(BIN)/mypy

unit: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)  ## national-scale benchmark (not part of the test run)
	$(BIN)/python -m benchmarks.run --cases 850000

clean:
	rm -rf $(VENV) .pytest_cache .mypy_cache .ruff_cache
