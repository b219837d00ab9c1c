# Two entry points that do all set-up on a fresh machine (Python 3.11+, make, apt):
#   make demo   -- the main job on the built-in simulated bench
#   make test   -- lint and the whole test suite
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test venv clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

venv: $(STAMP)

demo: $(STAMP)
	$(BIN)/pnbench demo

test: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/python -m pytest

clean:
	rm -rf $(VENV) build *.egg-info
