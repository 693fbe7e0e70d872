# One command each: `make serve` runs the whole stack, `make test` the whole suite.
# Both create .venv and install the project from scratch when needed.

PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-$(shell cat pyproject.toml docker/constraints.txt | cksum | cut -d' ' -f1)

.PHONY: install serve test lint bench openapi lock clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml docker/constraints.txt | $(BIN)/python
	$(BIN)/python -m pip install --quiet -c docker/constraints.txt -e '.[test,bench]'
	rm -f $(VENV)/.installed-*
	touch $@

install: $(STAMP)

serve: install
	$(BIN)/lacuna serve

lint: install
	$(BIN)/ruff check service workers tests
	$(BIN)/mypy

# Redis: LACUNA_REDIS_URL if set, else 127.0.0.1:6379, else tests/conftest.py starts a
# redis-server on a free port for the session and stops it afterwards.
test: lint
	$(BIN)/python -m pytest

bench: install
	$(BIN)/python -m tests.benchmarks.run

openapi: install
	$(BIN)/lacuna openapi --out openapi/openapi.json

# Refresh the pinned versions deployments install (docker/constraints.txt).
lock: install
	$(BIN)/python -m pip freeze --exclude-editable | grep -v '^-e' > docker/constraints.txt

clean:
	rm -rf $(VENV) .mypy_cache .pytest_cache .ruff_cache
