# Everything a fresh machine needs is installed from here: a local virtual
# environment (.venv) for Python and node_modules/ for the MicroPython port.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed
STUBS := $(VENV)/board-stubs
STUBS_STAMP := $(STUBS)/.installed
BOARD_PORTS := esp32 rp2
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

lint: setup $(STUBS_STAMP)
	$(VENV)/bin/ruff check host protocol firmware tests
	$(VENV)/bin/mypy host/slipless
	for port in $(BOARD_PORTS); do \
	  MYPYPATH=$(STUBS)/$$port:firmware:protocol $(VENV)/bin/mypy \
	    --config-file tests/firmware/mypy_board.ini --custom-typeshed-dir $(STUBS)/$$port \
	    firmware/*.py protocol/wire.py || exit 1; \
	done
	$(PY) protocol/vectors/build.py --check

# MicroPython's own type stubs per port, kept apart from the venv's packages
# because they replace the standard library's stubs.
$(STUBS_STAMP): $(STAMP)
	for port in $(BOARD_PORTS); do \
	  $(PY) -m pip install --quiet --target $(STUBS)/$$port "micropython-$$port-stubs>=1.27" || exit 1; \
	done
	touch $(STUBS_STAMP)

demo: setup
	$(VENV)/bin/slipless demo --out $(DEMO_OUT)

bench: setup
	$(PY) tests/bench/run_bench.py

clean:
	rm -rf $(VENV) node_modules $(DEMO_OUT) .pytest_cache
