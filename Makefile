# Every target makes its own virtual environment in .venv from the package registries.
PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV   := .venv
BIN    := $(VENV)/bin
STUDY  ?= scenarios/oxidation.toml

.PHONY: demo sweep test bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(VENV)/.installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test,bench]'
	touch $@

demo: $(VENV)/.installed
	$(BIN)/tubeyield check $(STUDY)
	$(BIN)/tubeyield optimize $(STUDY) --save reports/results/oxidation
	$(BIN)/tubeyield front $(STUDY) --save reports/results/oxidation
	$(BIN)/tubeyield window $(STUDY) --at reports/results/oxidation/optimum.json --save reports/results/oxidation
	$(BIN)/tubeyield report reports/results/oxidation --out reports/oxidation

# The demo study's 200-scenario kinetic-uncertainty sweep (resumable: run it again after Ctrl-C), its summary
# and the report with the sweep section.
sweep: $(VENV)/.installed
	$(BIN)/tubeyield sweep $(STUDY) --store reports/results/oxidation-sweep.sqlite --resume
	$(BIN)/tubeyield sweep-report reports/results/oxidation-sweep.sqlite --save reports/results/oxidation
	$(BIN)/tubeyield report reports/results/oxidation --out reports/oxidation

test: $(VENV)/.installed
	$(BIN)/python -m pyflakes src tests
	$(BIN)/python -m pytest -q

bench: $(VENV)/.installed
	$(BIN)/python tests/benchmarks/run.py --out reports/bench

clean:
	rm -rf $(VENV) build src/*.egg-info .pytest_cache
