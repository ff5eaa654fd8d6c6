# The two commands of the README: `make run` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
HOST ?= 127.0.0.1
PORT ?= 8000

.PHONY: run test

# Install into .venv, start the service on loopback with its night-job workers (the embedded
# queue under HEARTSWAY_DATA_DIR, default .heartsway-data), answer the demo request, keep serving.
run:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --disable-pip-version-check -e '.[formats]'
	@$(BIN)/heartsway serve --host $(HOST) --port $(PORT) & server=$$!; \
	trap 'kill $$server 2>/dev/null; wait $$server' INT TERM; \
	$(BIN)/heartsway demo --url http://$(HOST):$(PORT) --wait 60 || { kill $$server; exit 1; }; \
	echo "heartsway is serving on http://$(HOST):$(PORT) (Ctrl-C to stop)."; \
	wait $$server

# Install the test extras into .venv and the programs the tests drive, lint, run the suite.
test:
	bash .ci/install-test-tools
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --disable-pip-version-check -e '.[test]'
	$(BIN)/ruff check .
	$(BIN)/mypy features schemas simulation
	$(BIN)/python -m pytest
