# filmcalc: `make run` starts the dashboard, `make test` runs the tests.
# Both create .venv and install the pinned requirements when needed.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

CHROMIUM := /usr/bin/chromium
APT_LOG  := $${TMPDIR:-/tmp}/filmcalc-chromium-apt.log

.PHONY: setup run test bench clean chromium

$(STAMP): requirements.txt pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -r requirements.txt
	$(BIN)/python -m pip install --quiet --no-deps -e .
	touch $(STAMP)

setup: $(STAMP)

run: $(STAMP)
	$(BIN)/python -m streamlit run dashboard.py

# The browser tests (tests/test_browser.py) and benchmarks/bench_load.py drive Debian's Chromium, not a
# browser downloaded by Playwright. It is installed with apt when missing; where that cannot happen (not
# root, no apt, no network) this says why and carries on, and the browser tests skip, saying why.
chromium:
	@if [ -x $(CHROMIUM) ]; then :; \
	elif ! command -v apt-get >/dev/null 2>&1; then \
	  echo "make: no $(CHROMIUM) and no apt-get: the browser tests will skip (install Chromium at $(CHROMIUM))"; \
	elif [ "$$(id -u)" != 0 ]; then \
	  echo "make: no $(CHROMIUM) and not root: the browser tests will skip (sudo apt-get install chromium)"; \
	else \
	  echo "make: installing Debian's chromium for the browser tests (apt-get; log in $(APT_LOG))"; \
	  { apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium; } \
	    >$(APT_LOG) 2>&1 \
	    || { tail -n 5 $(APT_LOG); echo "make: apt-get could not install chromium: the browser tests will skip"; }; \
	fi

test: $(STAMP) chromium
	$(BIN)/python -m pytest

bench: $(STAMP) chromium
	$(BIN)/python benchmarks/bench_sweep.py
	$(BIN)/python benchmarks/bench_chart.py
	$(BIN)/python benchmarks/bench_photo.py
	$(BIN)/python benchmarks/bench_spectra.py
	$(BIN)/python benchmarks/bench_sequence.py
	$(BIN)/python benchmarks/bench_runs.py
	$(BIN)/python benchmarks/bench_load.py

clean:
	rm -rf $(VENV) .pytest_cache .hypothesis test-artifacts
