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

# On a fresh database the demo's studies are 1 (process FMEA), 2 (design FMEA) and 3 (quick 1-5 study).
demo: install
	$(BIN)/abate db upgrade
	$(BIN)/abate demo load
	$(BIN)/abate remind --now
	@token=$$($(BIN)/abate token create --name "demo admin" --role admin | tail -n 1); \
	base="http://$(HOST):$(PORT)"; auth="Authorization: Bearer $$token"; \
	echo; echo "Abate demo: $$base/v1/studies  (1 process FMEA, 2 design FMEA, 3 quick 1-5 study)"; \
	echo "API token (admin, shown once): $$token"; \
	echo "Ranking, highest RPN first: curl -H \"$$auth\" \"$$base/v1/studies/1/modes?sort=-rpn&limit=10\""; \
	echo "Risk history, weekly:       curl -H \"$$auth\" \"$$base/v1/studies/1/history?interval=week\""; \
	echo "Overdue actions:            curl -H \"$$auth\" \"$$base/v1/actions?overdue=true\""; \
	echo "Burn-down chart:            $$base/v1/studies/1/history.svg"; \
	echo "  (it needs the token too:  curl -H \"$$auth\" -o burn-down.svg $$base/v1/studies/1/history.svg)"; \
	echo "Reminder mails (Maildir):   instance/maildir/new"; echo
	$(BIN)/abate serve --host $(HOST) --port $(PORT)

test: install
	$(BIN)/python -m pytest $(PYTEST_ARGS)

openapi: install
	$(BIN)/abate openapi --output openapi/abate-v1.json

benchmark: install
	$(BIN)/python benchmarks/run

clean:
	rm -rf $(VENV) instance .pytest_cache
