# Two-command quick start: `make demo` and `make test` each set up .venv when missing.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
DEMO_DIR ?= cueplan-demo

.PHONY: demo test bench fixtures lint typecheck clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(VENV)/.installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(VENV)/.installed $@

demo: $(VENV)/.installed
	$(BIN)/cueplan demo --out $(DEMO_DIR)

test: $(VENV)/.installed-test
	$(BIN)/python -m pytest -q --cov --cov-report=term:skip-covered

bench: $(VENV)/.installed-test
	$(BIN)/python -m benchmarks

fixtures: $(VENV)/.installed-test
	$(BIN)/python fixtures/make_subtitle_fixtures.py
	$(BIN)/python fixtures/demo/make_lines.py

typecheck: $(VENV)/.installed-test
	$(BIN)/python -m mypy

clean:
	rm -rf $(VENV) $(DEMO_DIR) .pytest_cache .mypy_cache .hypothesis
