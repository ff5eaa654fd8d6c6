# The two commands of the README: `make run` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
HOST ?= 127.0.0.1
PORT ?= 8000

.PHONY: run test

# Install into .venv, start the service on loopback, answer the demo request, keep serving.
run:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --disable-pip-version-check -e .
	@HEARTSWAY_BIND=$(HOST):$(PORT) $(BIN)/gunicorn --config python:service.gunicorn_conf \
	    --no-control-socket "service:create_app()" & server=$$!; \
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
