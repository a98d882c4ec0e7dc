# One entry point for every gate. `make demo` and `make test` each build .venv on first use;
# `make demo` writes the demo plan (JSON), its spectrum (SVG, PNG) and carriers (CSV) under out/.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test lint types pytest serve bench clean openapi

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test,dev]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/bandwright demo

test: $(STAMP) lint types pytest

lint: $(STAMP)
	$(BIN)/ruff check solver service tests bench
	$(BIN)/ruff format --check solver service tests bench

types: $(STAMP)
	$(BIN)/mypy

pytest: $(STAMP)
	$(BIN)/pytest -q

serve: $(STAMP)
	$(BIN)/bandwright serve

bench: $(STAMP)
	$(BIN)/python bench/physics.py

openapi: $(STAMP)
	$(BIN)/python -m service.openapi_export openapi/openapi.json

clean:
	rm -rf $(VENV) .mypy_cache .ruff_cache .pytest_cache
