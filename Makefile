# Two commands for a fresh machine: `make demo` and `make test`.
PYTHON ?= python3.12
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test install bench reference clean

# Python 3.12 or newer (Mesa 3.5 needs it): $(PYTHON) if present, else python3; anything older stops here in one line.
$(BIN)/python:
	@py=$$(command -v $(PYTHON) || command -v python3); \
	if [ -z "$$py" ] || ! "$$py" -c 'import sys; sys.exit(sys.version_info < (3, 12))' 2>/dev/null; then \
	  echo "undertow needs Python 3.12 or newer; found $${py:-no python3}$${py:+ ($$("$$py" -V 2>&1))}. Point make at one: make PYTHON=/path/to/python3.12 demo" >&2; \
	  exit 2; \
	fi; \
	"$$py" -m venv $(VENV)

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
