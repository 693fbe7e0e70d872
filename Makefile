# One command each: `make serve` runs the whole stack, `make test` the whole suite.
# Both create .venv and install the project from scratch when needed.

PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
HASH   := $(shell cat pyproject.toml docker/constraints.txt | cksum | cut -d' ' -f1)
STAMP  := $(VENV)/.installed-$(HASH)
DEV    := $(VENV)/.installed-dev-$(HASH)

.PHONY: install install-dev browser serve test lint bench estimates fuzz soak openapi lock clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# The server (what `make serve` needs; `pip install lacuna` alone is the client) ...
$(STAMP): pyproject.toml docker/constraints.txt | $(BIN)/python
	$(BIN)/python -m pip install --quiet -c docker/constraints.txt -e '.[server]'
	rm -f $(VENV)/.installed-*
	touch $@

# ... and with the test and benchmark extras.
$(DEV): $(STAMP)
	$(BIN)/python -m pip install --quiet -c docker/constraints.txt -e '.[server,test,bench]'
	touch $@

install: $(STAMP)

install-dev: $(DEV)

serve: install
	$(BIN)/lacuna serve

lint: install-dev
	$(BIN)/ruff check lacuna_client service workers tests
	$(BIN)/ruff format --check lacuna_client service workers tests
	$(BIN)/mypy

# Headless Chromium for the job page's browser test (tests/e2e/test_browser.py). Installing it
# means system packages (Debian's chromium and chromium-driver, a few hundred MB through
# apt-get), so this says so before it does it, and `make test BROWSER=skip` skips the install
# (the browser test is then skipped, and says why). Without apt-get as root it tells how to get
# it. `make browser` alone installs it.
BROWSER ?= install
browser:
	@if command -v chromium >/dev/null || command -v chromium-browser >/dev/null; then :; \
	elif [ "$(BROWSER)" = skip ]; then \
		echo "BROWSER=skip: not installing chromium; the browser test will be skipped"; \
	elif command -v apt-get >/dev/null && [ "$$(id -u)" = 0 ]; then \
		echo "installing system packages chromium and chromium-driver (apt-get) for the browser" \
		     "test; 'make test BROWSER=skip' skips this and that test"; \
		DEBIAN_FRONTEND=noninteractive apt-get install -y -q chromium chromium-driver >/dev/null \
		|| { apt-get update -q >/dev/null && DEBIAN_FRONTEND=noninteractive \
		     apt-get install -y -q chromium chromium-driver >/dev/null; }; \
	else echo "no chromium, and no apt-get as root to install it: the browser test will be" \
		"skipped (install chromium, or run 'make browser' as root)"; fi

# Redis: the suite starts its own redis-server on a free port and stops it afterwards; it
# never touches another (LACUNA_TEST_REDIS_URL names a shared one explicitly).
test: lint browser
	$(BIN)/python -m pytest

bench: install-dev
	$(BIN)/python -m tests.benchmarks.run

# The cost model of jobs (workers/spec/cost_model.json): a grid of sizes per kind of job,
# each measured in a forked process capped in memory and time (about 15 minutes), then fitted.
estimates: install-dev
	$(BIN)/python -m tests.benchmarks.costs

# Schemathesis against a real `lacuna serve` on 127.0.0.1 (its own embedded Redis, one worker),
# following the document's links: at least 1000 requests, 4 minutes of fuzzing, memory and
# wall clock capped (tests/fuzz/run.py; it prints where its reports are).
fuzz: install-dev
	$(BIN)/python -m tests.fuzz.run

# A bounded soak of a real stack with its own Redis and data directory on 127.0.0.1 while
# workers, Redis and gunicorn are SIGKILLed (tests/soak/run.py; about 5 minutes on 2 cores).
# RLIMIT_AS caps each process (set inside), `timeout` the whole run. SOAK_ARGS="--jobs 150"
# for a short one.
SOAK_ARGS ?=
soak: install-dev
	timeout 900 $(BIN)/python -m tests.soak.run $(SOAK_ARGS)

# The committed OpenAPI document and the README's example picture, both generated.
openapi: install-dev
	$(BIN)/lacuna openapi --out openapi/openapi.json
	$(BIN)/python -m workers.scenario.picture --out openapi/examples/diagram.svg

# Refresh the pinned versions deployments install (docker/constraints.txt).
lock: install-dev
	$(BIN)/python -m pip freeze --exclude-editable | grep -v '^-e' > docker/constraints.txt

clean:
	rm -rf $(VENV) .mypy_cache .pytest_cache .ruff_cache
