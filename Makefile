# Two entry points: `make demo` (the main job, offline) and `make test` (the whole suite).
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test test-fast bench clean

$(BIN)/python:
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/harness run configs/quickstart.toml
	$(BIN)/harness report results/quickstart

test: $(STAMP)
	$(BIN)/python -m pytest -q -p no:cacheprovider

test-fast: $(STAMP)
	$(BIN)/python -m pytest -q -m "not slow" -p no:cacheprovider

bench: $(STAMP)
	$(BIN)/harness bench encoders

clean:
	rm -rf $(VENV) build *.egg-info
