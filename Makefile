# Phasewright: `make run` starts everything on this machine; `make test` runs the whole suite.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
PORT ?= 8000
export DJANGO_SETTINGS_MODULE := webapp.settings

.PHONY: run test install install-test migrate seed clean browser

$(VENV)/.installed: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: $(VENV)/.installed pyproject.toml
	$(PY) -m pip install --quiet -e '.[test]'
	touch $@

install: $(VENV)/.installed

install-test: $(VENV)/.installed-test

migrate: install
	$(PY) manage.py migrate --noinput

seed: migrate
	$(PY) manage.py seed_demo

run: seed
	$(PY) manage.py serve --port $(PORT)

test: install-test
	$(PY) tests/run_suite.py

clean:
	rm -rf var/broker var/test-phasewright.sqlite3
