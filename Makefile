# exomap task runner; the targets match the README.
#   make install   editable install with the test extras (+ Chromium for the browser tests and the PostgreSQL
#                  server binaries for the shared-store tests, when missing)
#   make test      the whole test suite, browser tests included (installs first)
#   make serve     the web service with the demo scenarios on the embedded SQLite store (installs first)
#   make bench     the side-by-side benchmarks in benchmarks/
#   make lint      ruff format --check, ruff check, mypy on the core
#   make openapi   rewrite docs/openapi.json, the API's committed contract, from the code

# The project's virtual environment when there is one (.ci/run makes it), else the python on PATH.
PYTHON ?= $(if $(wildcard .venv/bin/python),.venv/bin/python,python3)
# apt-get needs root; use sudo when we are not
SUDO := $(shell [ "$$(id -u)" = 0 ] || echo sudo)
# the console script of the same environment as PYTHON
EXOMAP := $(PYTHON) -c "import sys; from exomap.cli import main; sys.exit(main())"
STAMP := build/.install-stamp

.PHONY: install test serve bench lint openapi

# Reinstall only when the package metadata changed (an editable install picks up source changes itself).
$(STAMP): pyproject.toml
	$(PYTHON) -m pip install -e '.[test]'
	@if [ ! -x /usr/bin/chromium ]; then \
		echo "Chromium not found at /usr/bin/chromium: installing it for the browser tests"; \
		$(SUDO) apt-get update && $(SUDO) apt-get install -y chromium; \
	fi
	@if ! ls /usr/lib/postgresql/*/bin/initdb >/dev/null 2>&1; then \
		echo "PostgreSQL server binaries not found: installing them for the shared-store tests"; \
		$(SUDO) apt-get update && { $(SUDO) apt-get install -y postgresql-15 || $(SUDO) apt-get install -y postgresql; }; \
	fi
	@mkdir -p $(dir $(STAMP)) && touch $(STAMP)

install: $(STAMP)

test: $(STAMP)
	$(PYTHON) -m pytest

serve: $(STAMP)
	$(EXOMAP) serve

bench: $(STAMP)
	@set -e; for f in benchmarks/*.py; do echo "== $$f"; $(PYTHON) $$f; done

lint: $(STAMP)
	$(PYTHON) -m ruff format --check server tests benchmarks
	$(PYTHON) -m ruff check server tests benchmarks
	$(PYTHON) -m mypy

openapi: $(STAMP)
	$(PYTHON) -m exomap.web.apidocs docs/openapi.json
