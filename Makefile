# Each target builds its own virtual environment on first use, so a fresh clone needs only Python 3.11.
PYTHON ?= python3
VENV ?= .venv
PY := $(VENV)/bin/python

.PHONY: demo test bench clean

$(VENV)/.installed: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e ".[test,bench]"
	touch $@

demo: $(VENV)/.installed
	$(PY) -m pocketforest demo
	$(PY) -m pocketforest verify exports/demo

test: $(VENV)/.installed
	$(PY) -m pytest -q -n auto --maxprocesses=4

bench: $(VENV)/.installed
	$(PY) -m pocketforest.bench

clean:
	rm -rf $(VENV) exports/demo .pytest_cache
