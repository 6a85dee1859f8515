# curvewright developer commands. Needs only python3 (3.10+; CI uses 3.11), Node 20 with npm,
# and GNU make. Everything is installed into $(VENV) and node_modules/; stamp files make repeated
# runs cheap: the Python install is redone only when pyproject.toml or _version.py changes, the
# npm install only when package.json or package-lock.json changes, the bundle only when js/ does.

SHELL := bash
.SHELLFLAGS := -euo pipefail -c
.DEFAULT_GOAL := help
.DELETE_ON_ERROR:
MAKEFLAGS += --no-builtin-rules

VENV ?= .venv
PYTHON ?= python3
NPM ?= npm

PY := $(VENV)/bin/python
BIN := $(VENV)/bin
PY_STAMP := $(VENV)/.curvewright-install.stamp
NODE_STAMP := node_modules/.curvewright-install.stamp
BUNDLE := src/curvewright/static/widget.js
LOCKFILE := $(wildcard package-lock.json)
JS_SOURCES := $(shell find js -type f 2>/dev/null)
NOTEBOOKS := $(wildcard examples/*.ipynb)
# Extra arguments for pytest, e.g. `make test-py PYTEST_ARGS="-k expr -x"`.
PYTEST_ARGS ?=
# 1 = "no browser tests collected" is an error (.ci/run sets it); 0 = only a warning.
CURVEWRIGHT_REQUIRE_BROWSER ?= 0
export CURVEWRIGHT_REQUIRE_BROWSER

.PHONY: help venv dev build-js lint test test-py test-js test-browser test-notebooks demo bench \
	wheel clean

help:
	@echo "make venv           create $(VENV), install curvewright editable with [dev,browser], npm deps"
	@echo "make build-js       rebuild the front-end bundle ($(BUNDLE))"
	@echo "make lint           ruff check, ruff format --check, mypy --strict, tsc"
	@echo "make test           lint + test-py + test-js + test-browser + test-notebooks"
	@echo "make test-py        Python tests (pytest -m 'not browser')"
	@echo "make test-js        front-end unit tests (vitest)"
	@echo "make test-browser   JupyterLab / Notebook 7 tests in Debian's chromium (pytest -m browser)"
	@echo "make test-notebooks execute examples/*.ipynb into a temporary directory"
	@echo "make demo           set up, then open examples/quickstart.ipynb in JupyterLab"
	@echo "make bench          fit speed vs scipy/lmfit, JS drag frame, in-browser frames (figures for README)"
	@echo "make wheel          build sdist + wheel into dist/ and check the wheel ships the bundle"
	@echo "make clean          remove build output and stamps (keeps $(VENV) and node_modules)"

# ---- set-up ---------------------------------------------------------------------------------

# Created only when missing: an existing environment (e.g. one made by hand) is reused as is.
$(PY):
	$(PYTHON) -m venv $(VENV)

$(NODE_STAMP): package.json $(LOCKFILE)
	@command -v $(NPM) >/dev/null || { echo "error: npm not found; install Node 20 (with npm)" >&2; exit 1; }
	if [ -f package-lock.json ]; then $(NPM) ci; else $(NPM) install; fi
	touch $@

# The editable install runs the hatch-jupyter-builder hook, which builds the bundle if it is
# missing or older than js/. node_modules is order-only so a package.json change does not force
# a Python reinstall.
$(PY_STAMP): pyproject.toml src/curvewright/_version.py | $(PY) $(NODE_STAMP)
	$(PY) -m pip install -e ".[dev,browser]"
	touch $@

venv: $(PY_STAMP) $(NODE_STAMP)

# DEVELOPERS.md calls it `make dev`.
dev: venv

# ---- front end ------------------------------------------------------------------------------

$(BUNDLE): $(JS_SOURCES) src/curvewright/expr_spec.json src/curvewright/params_spec.json package.json $(NODE_STAMP)
	$(NPM) run build
	@test -s $@ || { echo "error: npm run build did not write $@" >&2; exit 1; }
	@# esbuild may leave an unchanged output untouched; the mtime records "built from these sources".
	touch $@

build-js: $(NODE_STAMP)
	$(NPM) run build
	@test -s $(BUNDLE) || { echo "error: npm run build did not write $(BUNDLE)" >&2; exit 1; }
	touch $(BUNDLE)

# ---- checks ---------------------------------------------------------------------------------

lint: $(PY_STAMP) $(NODE_STAMP)
	$(BIN)/ruff check .
	$(BIN)/ruff format --check .
	$(BIN)/mypy
	$(NPM) run typecheck

test-py: $(PY_STAMP) $(BUNDLE)
	$(BIN)/pytest -m "not browser" $(PYTEST_ARGS)

test-js: $(NODE_STAMP)
	$(NPM) test

# pytest exits with 5 when it collects nothing; that is only tolerated outside CI.
test-browser: $(PY_STAMP) $(BUNDLE)
	@command -v chromium >/dev/null || { \
	  echo "error: the browser tests need Debian's chromium, which is not installed." >&2; \
	  echo "       Run: sudo apt-get update && sudo apt-get install -y chromium" >&2; \
	  echo "       (or run .ci/run, which installs it)." >&2; exit 1; }
	rc=0; $(BIN)/pytest -m browser $(PYTEST_ARGS) || rc=$$?; \
	if [ $$rc -eq 5 ]; then \
	  if [ "$(CURVEWRIGHT_REQUIRE_BROWSER)" = 1 ]; then \
	    echo "error: no browser tests were collected, but CURVEWRIGHT_REQUIRE_BROWSER=1" >&2; exit 1; \
	  fi; \
	  echo "WARNING: no browser tests exist yet (pytest collected none); nothing was checked."; \
	elif [ $$rc -ne 0 ]; then exit $$rc; fi

test-notebooks: $(PY_STAMP) $(BUNDLE)
	@if [ -z "$(NOTEBOOKS)" ]; then echo "WARNING: no notebooks in examples/; nothing executed."; exit 0; fi; \
	out=$$(mktemp -d); trap 'rm -rf "$$out"' EXIT; \
	for nb in $(NOTEBOOKS); do \
	  echo "executing $$nb"; \
	  $(BIN)/jupyter nbconvert --to notebook --execute --ExecutePreprocessor.timeout=600 \
	    --ExecutePreprocessor.kernel_name=python3 --output-dir "$$out" "$$nb"; \
	done

test: lint test-py test-js test-browser test-notebooks

# ---- running --------------------------------------------------------------------------------

# tools/demo_server.py holds the command and its configuration (tests/test_demo.py starts the
# same server): it keeps yarn's "Fail to get yarn configuration" page out of the log.
demo: $(PY_STAMP) $(BUNDLE)
	$(PY) tools/demo_server.py

bench: $(PY_STAMP) $(BUNDLE)
	$(PY) benchmarks/run.py
	$(PY) benchmarks/batch_engine.py
	$(PY) benchmarks/fit_groups.py
	node js/bench/expr-speed.mjs
	node js/bench/drag-frame.mjs
	$(PY) benchmarks/browser_frames.py

# The sdist is built first and the wheel from the unpacked sdist (python -m build), so this also
# checks that the sdist carries the bundle and that building from it needs no rebuild.
wheel: $(PY_STAMP) $(BUNDLE)
	rm -rf dist
	$(PY) -m build --outdir dist .
	@whl=$$(ls dist/*.whl); \
	if $(PY) -m zipfile -l "$$whl" | grep -q 'curvewright/static/widget.js'; then \
	  echo "ok: $$whl contains curvewright/static/widget.js"; \
	else echo "error: $$whl does not contain curvewright/static/widget.js" >&2; exit 1; fi

clean:
	rm -rf dist build src/curvewright/static .pytest_cache .mypy_cache .ruff_cache .hypothesis \
	  .benchmarks test-artifacts $(PY_STAMP) $(NODE_STAMP)
	find src tests -name __pycache__ -type d -prune -exec rm -rf {} +
