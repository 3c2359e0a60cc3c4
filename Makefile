# Quick start: `make demo` and `make test` work on a fresh machine with Python >= 3.11 and make.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed
OUT    ?= demo-output

.PHONY: demo test bench calibrate lint table clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e ".[test,cluster,frames]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/python scripts/demo.py --out $(OUT)

test: $(STAMP)
	$(BIN)/python -m pytest -n 2 -q --doctest-modules ringsearch tests

lint: $(STAMP)
	$(BIN)/ruff check ringsearch tests scripts

bench: $(STAMP)
	$(BIN)/python scripts/bench_all.py

# Coverage of the overtone analysis' intervals over its prior (writes scripts/calibration-results/).
calibrate: $(STAMP)
	$(BIN)/python scripts/calibrate.py

# Regenerate the shipped QNM table from our own Leaver solver (slow; not needed to use the package).
table: $(STAMP)
	$(BIN)/python scripts/make_qnm_table.py

clean:
	rm -rf $(VENV) $(OUT) .pytest_cache
