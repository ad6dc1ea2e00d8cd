# Two commands on a fresh machine: `make demo` and `make test` (see README.md).
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
HOST ?= 127.0.0.1
PORT ?= 8000
PYTEST_ARGS ?=

.PHONY: demo test install openapi benchmark clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# Installed with test extras and the client, so one virtualenv serves demo and tests.
$(VENV)/.installed: $(BIN)/python pyproject.toml clients/python/pyproject.toml
	$(BIN)/python -m pip install --quiet -e '.[test]' -e clients/python
	touch $@

install: $(VENV)/.installed

demo: install
	$(BIN)/abate db upgrade
	$(BIN)/abate demo load
	@token=$$($(BIN)/abate token create --name "demo admin" --role admin | tail -n 1); \
	echo; echo "Abate demo: http://$(HOST):$(PORT)/v1/studies"; \
	echo "API token (admin, shown once): $$token"; \
	echo "Try: curl -H \"Authorization: Bearer $$token\" http://$(HOST):$(PORT)/v1/studies"; echo
	$(BIN)/abate serve --host $(HOST) --port $(PORT)

test: install
	$(BIN)/python -m pytest $(PYTEST_ARGS)

openapi: install
	$(BIN)/abate openapi --output openapi/abate-v1.json

benchmark: install
	$(BIN)/python benchmarks/run

clean:
	rm -rf $(VENV) instance .pytest_cache
