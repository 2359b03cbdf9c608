# Two commands for a fresh machine: `make demo` and `make test`.
PYTHON ?= python3.12
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test install bench reference clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV) || python3 -m venv $(VENV)

$(STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[dev]'
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/undertow demo

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	$(BIN)/python bench/engine.py

reference: $(STAMP)
	$(BIN)/python -m abm.reference

clean:
	rm -rf $(VENV) outputs/*/
