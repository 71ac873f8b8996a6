# Sidestep: set up, test, demo. The virtual environment is made here, nothing else is needed.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install -q --upgrade pip
	$(BIN)/pip install -q -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/sidestep demo

test: $(STAMP)
	$(BIN)/ruff check planner adapters tests benchmarks
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check planner adapters tests benchmarks

bench: $(STAMP)
	$(BIN)/python -m benchmarks.run

clean:
	rm -rf $(VENV) build *.egg-info
