VENV ?= .venv
PY := $(VENV)/bin/python

.PHONY: demo test services lint

$(VENV)/.installed: pyproject.toml
	python3 -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e '.[dev]'
	touch $@

services:
	@bash scripts/test-services.sh

demo: $(VENV)/.installed
	$(VENV)/bin/leakfleet demo

lint: $(VENV)/.installed
	$(VENV)/bin/ruff check .
	$(VENV)/bin/mypy

test: $(VENV)/.installed services lint
	LEAKFLEET_SCREENSHOTS=$${LEAKFLEET_SCREENSHOTS:-$(CURDIR)/build/screenshots} $(PY) -m pytest
