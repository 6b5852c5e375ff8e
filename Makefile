# filmcalc: `make run` starts the dashboard, `make test` runs the tests.
# Both create .venv and install the pinned requirements when needed.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

.PHONY: setup run test bench clean

$(STAMP): requirements.txt pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -r requirements.txt
	$(BIN)/python -m pip install --quiet --no-deps -e .
	touch $(STAMP)

setup: $(STAMP)

run: $(STAMP)
	$(BIN)/python -m streamlit run dashboard.py

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_sweep.py
	$(BIN)/python benchmarks/bench_chart.py
	$(BIN)/python benchmarks/bench_photo.py
	$(BIN)/python benchmarks/bench_spectra.py
	$(BIN)/python benchmarks/bench_sequence.py

clean:
	rm -rf $(VENV) .pytest_cache .hypothesis
