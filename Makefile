# hsat: every target builds its own environment in .venv from pyproject.toml.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed
DEMO_OUT ?= demo/out
INBOX  ?= inbox
OUT    ?= reports
JOBS   ?=
SCHEDULER ?=

.PHONY: help env demo test lint bench nightly clean

help:
	@echo "make demo     generate the invented demo clinic's nights and run the whole job on them"
	@echo "make test     lint and run the test suite"
	@echo "make bench    run the benchmarks; results go to bench/results/"
	@echo "make nightly INBOX=dir OUT=dir   run the nightly batch over an inbox"
	@echo "make clean    remove the environment and generated files"

env: $(STAMP)

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[dev]'
	@touch $(STAMP)

# The demo starts from scratch each time: its folder holds only invented data.
demo: $(STAMP)
	rm -rf $(DEMO_OUT)
	$(BIN)/python demo/run_demo.py --out $(DEMO_OUT)

test: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/python -m pytest -q

lint: $(STAMP)
	$(BIN)/ruff check .

bench: $(STAMP)
	$(BIN)/python bench/run_bench.py --out bench/results

nightly: $(STAMP)
	$(BIN)/hsat batch "$(INBOX)" --out "$(OUT)" $(if $(JOBS),--jobs $(JOBS),) $(if $(SCHEDULER),--scheduler $(SCHEDULER),)

clean:
	rm -rf $(VENV) $(DEMO_OUT) .pytest_cache .ruff_cache
