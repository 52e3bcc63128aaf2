VENV ?= .venv
PY := $(VENV)/bin/python

.PHONY: demo test services

$(VENV)/.installed: pyproject.toml
	python3 -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e '.[dev]'
	touch $@

services:
	@bash scripts/test-services.sh

demo: $(VENV)/.installed
	$(VENV)/bin/leakfleet sim --scenario demo --speed 60

test: $(VENV)/.installed services
	$(PY) -m pytest
