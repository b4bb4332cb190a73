# Everything a fresh machine needs is installed from here: a local virtual
# environment (.venv) for Python and node_modules/ for the MicroPython port.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed
NODE_STAMP := node_modules/.installed
DEMO_OUT ?= demo-out

.PHONY: setup test lint demo bench clean

setup: $(STAMP) $(NODE_STAMP)

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	touch $(STAMP)

$(NODE_STAMP): package.json package-lock.json
	npm ci --no-audit --no-fund --loglevel=error
	touch $(NODE_STAMP)

test: setup lint
	$(PY) -m pytest -q

lint: setup
	$(VENV)/bin/ruff check host protocol firmware tests
	$(VENV)/bin/mypy host/slipless
	$(PY) protocol/vectors/build.py --check

demo: setup
	$(VENV)/bin/slipless demo --out $(DEMO_OUT)

bench: setup
	$(PY) tests/bench/run_bench.py

clean:
	rm -rf $(VENV) node_modules $(DEMO_OUT) .pytest_cache
