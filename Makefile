# Two commands set up a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench venv clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

venv: $(STAMP)

demo: $(STAMP)
	$(BIN)/sondage demo -o demo-output

test: $(STAMP)
	$(BIN)/python -m pytest -q

# The speed, memory and calibration studies (tens of minutes on 2 cores; the coverage study is
# the long one).  Write what they print into benchmarks/RESULTS.md with the machine and date.
bench: $(STAMP)
	$(BIN)/python benchmarks/stopping_vs_astar.py
	$(BIN)/python benchmarks/forward_speed.py --json
	$(BIN)/python benchmarks/inversion_speed.py --json
	$(BIN)/python benchmarks/inversion_speed.py --scenario nodes --json
	$(BIN)/python benchmarks/inversion_speed.py --scenario nodes3 --json
	$(BIN)/python benchmarks/series_speed.py --json
	$(BIN)/python benchmarks/plan_speed.py --json
	$(BIN)/python benchmarks/coverage.py --json

clean:
	rm -rf $(VENV) demo-output
