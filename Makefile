# Two entry points: `make demo` (the main job) and `make test` (the whole suite). The first
# `make` installs into .venv from the package index; the demo itself reads only data that
# ships inside installed packages. The command is .venv/bin/levelfold.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-run
TEST_STAMP := $(VENV)/.installed-test
# setuptools notes on every editable install of a flat layout that a folder named like the
# package may shadow it; here that folder is the package, so the note is silenced
PIP := $(BIN)/python -W "ignore:Editable installation:UserWarning" -m pip

.PHONY: demo test test-fast lint bench clean

$(BIN)/python:
	$(PY) -m venv $(VENV)
	$(PIP) install --quiet --upgrade pip

# the runtime only (demo, bench); the distribution was called `harness` before it became
# levelfold, so an older .venv (and checkout) loses that name first
$(STAMP): pyproject.toml | $(BIN)/python
	$(PIP) uninstall --quiet --yes harness 2>/dev/null || true
	rm -rf harness.egg-info
	$(PIP) install --quiet -e .
	touch $(STAMP)

# the test extra on top (test, test-fast)
$(TEST_STAMP): $(STAMP)
	$(PIP) install --quiet -e ".[test]"
	touch $(TEST_STAMP)

demo: $(STAMP)
	$(BIN)/levelfold run configs/quickstart.toml
	$(BIN)/levelfold report results/quickstart

test: lint
	$(BIN)/python -m pytest -q -p no:cacheprovider

test-fast: lint
	$(BIN)/python -m pytest -q -m "not slow" -p no:cacheprovider

# ruff's lint and format check ([tool.ruff] in pyproject.toml); `make test` runs it first
lint: $(TEST_STAMP)
	$(BIN)/ruff check harness tests
	$(BIN)/ruff format --check harness tests

bench: $(STAMP)
	$(BIN)/levelfold bench encoders

clean:
	rm -rf $(VENV) build *.egg-info
