# `make test` and `make demo` bootstrap .venv from nothing (Python 3.11+, pip, make).
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp
DEMO_OUT ?= demo-run

.PHONY: test demo train lint bench clean

$(STAMP): pyproject.toml requirements-lock.txt
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -c requirements-lock.txt -e '.[dev]'
	touch $(STAMP)

test: $(STAMP)
	$(BIN)/python -m pytest -q tests

demo: $(STAMP)
	$(BIN)/python datasets/demo/run_demo.py $(DEMO_OUT)

# TRAIN_COMPUTE=N first computes (or resumes) N model compounds at GFN2-xTB (~30 s each per core)
TRAIN_COMPUTE ?= 0
train: $(STAMP)
	$(BIN)/libconf train --compute $(TRAIN_COMPUTE)

lint: $(STAMP)
	$(BIN)/python -m ruff check libconf tests benchmarks examples
	$(BIN)/python -m ruff format --check libconf tests benchmarks examples

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_analyze.py

clean:
	rm -rf $(VENV) $(DEMO_OUT) .pytest_cache
