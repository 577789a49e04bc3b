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

RESULTS := reports/results/oxidation
FITTED  := --kinetics $(RESULTS)/fit.json

# The whole chain on the demo: kinetics fitted to the (invented) lab runs, then the optimum, front and window on the
# fitted network, the robust point under the fit's uncertainty and the catalyst activity, and the report.
demo: $(VENV)/.installed
	$(BIN)/tubeyield check $(STUDY)
	$(BIN)/tubeyield fit $(STUDY) --save $(RESULTS)
	$(BIN)/tubeyield optimize $(STUDY) $(FITTED) --save $(RESULTS)
	$(BIN)/tubeyield front $(STUDY) $(FITTED) --save $(RESULTS)
	$(BIN)/tubeyield window $(STUDY) $(FITTED) --at $(RESULTS)/optimum.json --save $(RESULTS)
	$(BIN)/tubeyield robust $(STUDY) $(FITTED) --save $(RESULTS)
	$(BIN)/tubeyield report $(RESULTS) --out reports/oxidation

# The demo study's 200-scenario sweep over the fit's own uncertainty and the catalyst activity (resumable: run it
# again after Ctrl-C; needs `make demo` first for the fit), its summary, the robust point validated beside the nominal
# and backed-off points, and the report with the sweep section.
sweep: $(VENV)/.installed
	$(BIN)/tubeyield sweep $(STUDY) $(FITTED) --store reports/results/oxidation-sweep.sqlite --resume
	$(BIN)/tubeyield sweep-report reports/results/oxidation-sweep.sqlite --save $(RESULTS)
	$(BIN)/tubeyield robust $(STUDY) $(FITTED) --save $(RESULTS)
	$(BIN)/tubeyield report $(RESULTS) --out reports/oxidation

test: $(VENV)/.installed
	$(BIN)/python -m pyflakes src tests
	$(BIN)/python -m pytest -q

bench: $(VENV)/.installed
	$(BIN)/python tests/benchmarks/run.py --out reports/bench

clean:
	rm -rf $(VENV) build src/*.egg-info .pytest_cache
