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

.PHONY: setup test lint demo bench clean browser dbus fuzz

setup: $(STAMP) $(NODE_STAMP)

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	touch $(STAMP)

$(NODE_STAMP): package.json package-lock.json
	npm ci --no-audit --no-fund --loglevel=error
	touch $(NODE_STAMP)

test: setup lint browser dbus
	$(PY) -m pytest -q

# Headless Chromium for the report's browser test: installed only where missing and
# apt-get can; never fails the build (the test skips, saying so, without it).
browser:
	command -v chromium >/dev/null || (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium) || true

# dbus-daemon for the tests that run bleak's BlueZ back end against a double of
# bluetoothd's D-Bus API on a private bus: installed only where missing and apt-get
# can; never fails the build (those tests skip, saying so, without it).
dbus:
	test -x /usr/bin/dbus-daemon || (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq dbus) || true

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

# Coverage-guided fuzzing (atheris, installed here only), FUZZ_SECONDS per reader;
# corpora kept in .fuzz/ between runs; a crash or hang leaves its input in .fuzz/.
FUZZ_SECONDS ?= 60
FUZZ_READERS := deframe decoder mirror capture capture_records btsnoop config commands
fuzz: setup
	$(PY) -m pip install --quiet atheris
	mkdir -p .fuzz
	for r in $(FUZZ_READERS); do \
	  echo "fuzz $$r ($(FUZZ_SECONDS) s)"; \
	  $(PY) tests/fuzz/fuzz_$$r.py .fuzz/corpus-$$r -max_total_time=$(FUZZ_SECONDS) -timeout=10 \
	    -rss_limit_mb=2048 -artifact_prefix=.fuzz/$$r- -print_final_stats=1 2>.fuzz/$$r.log \
	    || { tail -30 .fuzz/$$r.log; exit 1; }; \
	  grep -h "stat::number_of_executed_units" .fuzz/$$r.log; \
	done

clean:
	rm -rf $(VENV) node_modules $(DEMO_OUT) .pytest_cache
