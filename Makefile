# Evenframe: `make demo` runs the dashboard and a render worker; `make test` runs the suite.
PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: install demo test test-embedded test-services lint bench clean

$(STAMP): requirements.txt requirements-dev.txt
	@test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -r requirements-dev.txt
	@touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	@bash scripts/demo.sh

# The whole suite in the configuration the environment selects (embedded default when
# DATABASE_URL / CELERY_BROKER_URL are unset). Tests keep their own data folder so a running
# demo's worker never picks up test tasks.
test: $(STAMP)
	@EVENFRAME_DATA_DIR=$${EVENFRAME_DATA_DIR:-$(CURDIR)/data/test} $(PY) -m pytest $(PYTEST_ARGS); rc=$$?; \
	  if [ $$rc -eq 5 ]; then echo "pytest collected no tests"; rc=0; fi; exit $$rc

test-services: $(STAMP)
	DATABASE_URL=$${DATABASE_URL:-postgres://postgres@127.0.0.1:5432/evenframe} \
	CELERY_BROKER_URL=$${CELERY_BROKER_URL:-redis://127.0.0.1:6379/15} \
	EVENFRAME_SECRET_KEY=$${EVENFRAME_SECRET_KEY:-test-only-secret-key-for-the-suite-0123456789abcdef} \
	EVENFRAME_DEBUG=1 $(MAKE) test

# Style, the import contracts of DEVELOPERS.md (pyproject.toml [tool.importlinter]), private names, reasons for
# function-level imports of our modules, and types
# (mypy with the Django plugin; it reads the settings, so it gets a data folder of its own).
lint: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/ruff format --check .
	$(VENV)/bin/lint-imports
	$(PY) scripts/check_private_names.py
	$(PY) scripts/check_deferred_imports.py
	EVENFRAME_DATA_DIR=$${EVENFRAME_DATA_DIR:-$(CURDIR)/data/lint} $(VENV)/bin/mypy assets campaigns datasets render teams fleet evenframe dashboard api

bench: $(STAMP)
	$(PY) -m render.bench --frames 5

clean:
	rm -rf data/test .pytest_cache
