# Phasewright: `make run` starts everything on this machine; `make test` runs the whole suite.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
PORT ?= 8000
export DJANGO_SETTINGS_MODULE := webapp.settings

.PHONY: run test install install-test migrate seed clean browser vendor

$(VENV)/.installed: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: $(VENV)/.installed pyproject.toml
	$(PY) -m pip install --quiet -e '.[test]'
	touch $@

install: $(VENV)/.installed

# Browser libraries (the 3D view's three.js) from the npm registry into the static files: the site never
# loads code from elsewhere at run time. Needs Node.js and npm; without them the page says the view is missing.
VENDOR := webapp/static/vendor/three
FRONTEND := webapp/frontend
$(VENDOR)/.built: $(FRONTEND)/package.json $(FRONTEND)/package-lock.json
	cd $(FRONTEND) && npm ci --no-audit --no-fund --silent
	mkdir -p $(VENDOR)/addons/controls
	cp $(FRONTEND)/node_modules/three/build/three.module.min.js $(FRONTEND)/node_modules/three/LICENSE $(VENDOR)/
	cp $(FRONTEND)/node_modules/three/examples/jsm/controls/OrbitControls.js $(VENDOR)/addons/controls/
	touch $@

vendor:
	@$(MAKE) --no-print-directory $(VENDOR)/.built || echo "npm could not build the 3D viewer; the report pages will say so"

install-test: $(VENV)/.installed-test

migrate: install
	$(PY) manage.py migrate --noinput

seed: migrate
	$(PY) manage.py seed_demo

# The embedded site runs with DEBUG off, like production (friendly error pages, no URL listing), on plain
# HTTP on loopback, with a secret key generated once into var/.
EMBEDDED := PHASEWRIGHT_DEBUG=False PHASEWRIGHT_HTTPS=False PHASEWRIGHT_BEHIND_PROXY=False \
	PHASEWRIGHT_SECRET_KEY_FILE=var/secret_key PHASEWRIGHT_SITE_ROOT=http://127.0.0.1:$(PORT)

var/secret_key:
	mkdir -p var && (umask 077 && $(PY) -c "import secrets; print(secrets.token_urlsafe(64))" > $@)

run: seed vendor var/secret_key
	$(EMBEDDED) $(PY) manage.py collectstatic --noinput >/dev/null
	$(EMBEDDED) $(PY) manage.py serve --port $(PORT)

test: install-test vendor
	$(PY) tests/run_suite.py

clean:
	rm -rf var/broker var/test-phasewright.sqlite3
