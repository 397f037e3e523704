# Two commands do all the set-up on a fresh machine with only Python 3.11:
#   make demo   create .venv, install castline, run the bundled demo spec
#   make test   the same venv plus the test extras; linters, then the test suite

PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV   := .venv
BIN    := $(VENV)/bin
DEMO   := configs/compost_demo.yaml

.PHONY: demo test simulate lint benchmarks clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(VENV)/.installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@ $(VENV)/.installed

demo: $(VENV)/.installed
	$(BIN)/castline run $(DEMO)

lint: $(VENV)/.installed-test
	$(BIN)/ruff check pipeline tests benchmarks data_samples

test: lint
	$(BIN)/python -m pytest

# Simulations of the tests' size, too slow for make test (minutes); CI runs them too.
simulate: $(VENV)/.installed-test
	$(BIN)/python -m pytest -m simulation

benchmarks: $(VENV)/.installed-test
	@for b in benchmarks/bench_*.py; do [ -e "$$b" ] && $(BIN)/python "$$b"; done; true

clean:
	rm -rf $(VENV) build *.egg-info
