# Set-up and everyday commands. Each target creates the virtual environment
# it needs (.venv) on first use; nothing is installed outside it except the
# Debian packages the browser test needs (installed only when missing).

PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
DEMO_HOME ?= .sounding-demo

.PHONY: demo test lint serve bench system-deps clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	# torch is pinned in pyproject.toml (==2.13.0) so pip takes the CPU build.
	$(BIN)/pip install --quiet -e '.[test]'
	touch $(STAMP)

## demo: install, then run the whole job on the bundled demo history
demo: $(STAMP)
	rm -rf $(DEMO_HOME)
	SOUNDING_HOME=$(DEMO_HOME) $(BIN)/sounding demo
	@echo
	@echo "Page and API: SOUNDING_HOME=$(DEMO_HOME) $(BIN)/sounding serve  -> http://127.0.0.1:8000/"

## test: install, then run the whole test suite (browser test included)
test: $(STAMP) system-deps
	# Two workers, one file each at a time: module fixtures stay whole and the suite takes
	# about 9 minutes on 2 cores instead of 12.
	$(BIN)/python -m pytest -q -n 2 --dist loadfile

## lint: the import layers (import-linter contracts in pyproject.toml), ruff
## lint and format check, and mypy --strict on service/ and models/
lint: $(STAMP)
	$(BIN)/lint-imports
	$(BIN)/ruff check .
	$(BIN)/ruff format --check .
	$(BIN)/mypy

## system-deps: Debian's chromium for the browser test, when missing
system-deps:
	@command -v chromium >/dev/null 2>&1 || { \
	  if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then \
	    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends chromium fonts-noto-color-emoji; \
	  else echo "chromium is missing: install Debian's chromium package for the browser test"; fi; }

serve: $(STAMP)
	SOUNDING_HOME=$(DEMO_HOME) $(BIN)/sounding serve

## bench: the benchmarks under bench/ (ratios measured in one run)
bench: $(STAMP)
	$(BIN)/python bench/bench_import.py
	$(BIN)/python bench/bench_forecast.py

clean:
	rm -rf $(VENV) $(DEMO_HOME) .pytest_cache test-artifacts
