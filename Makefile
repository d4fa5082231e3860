# drawdown - set-up and everyday commands. `make demo` and `make test` each
# create .venv when it is missing, install into it, and run.
PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
PIP    := $(VENV)/bin/pip
export PYBAMM_DISABLE_TELEMETRY := true

.PHONY: install install-test demo test test-fast lint bench clean

$(VENV)/bin/activate:
	$(PYTHON) -m venv $(VENV)
	$(PIP) install --quiet --upgrade pip

$(VENV)/.installed: $(VENV)/bin/activate pyproject.toml
	$(PIP) install --quiet -e '.[all]'
	touch $@

$(VENV)/.installed-test: $(VENV)/.installed pyproject.toml
	$(PIP) install --quiet -e '.[test]'
	touch $@

install: $(VENV)/.installed          ## the package and the drawdown command in .venv

install-test: $(VENV)/.installed-test

demo: $(VENV)/.installed             ## simulate the bundled scenario, analyse, serve the dashboard
	$(VENV)/bin/drawdown --store demo-data/readings.sqlite demo

test: $(VENV)/.installed-test lint   ## lint, types, then every test (browser and broker tests need chromium and mosquitto)
	$(PY) -m pytest -q -p no:cacheprovider

# mypy reads files by path, so it sees the folders under the names they install as
# (drawdown.analysis, ...) through a tree of links in build/typecheck/.
lint: $(VENV)/.installed-test        ## ruff and mypy
	$(PY) -m ruff check --quiet .
	rm -rf build/typecheck && mkdir -p build/typecheck/drawdown
	for f in __init__.py __main__.py py.typed cli; do ln -s "$(CURDIR)/drawdown/$$f" build/typecheck/drawdown/$$f; done
	for d in analysis collector dashboard; do ln -s "$(CURDIR)/$$d" build/typecheck/drawdown/$$d; done
	cd build/typecheck && $(abspath $(PY)) -m mypy --config-file "$(CURDIR)/pyproject.toml" \
	    --cache-dir "$(CURDIR)/build/mypy-cache" --no-error-summary -p drawdown

test-fast: $(VENV)/.installed-test   ## skip the slow, browser and broker tests
	$(PY) -m pytest -q -p no:cacheprovider -m "not slow and not browser and not mqtt"

bench: $(VENV)/.installed-test       ## benchmark scripts; see DEVELOPERS.md
	$(PY) benchmarks/import_bench.py --scale 0.1
	$(PY) benchmarks/report_bench.py --scale 0.1
	$(PY) benchmarks/solar_bench.py --scale 0.1
	$(PY) benchmarks/collect_bench.py --scale 0.5
	$(PY) benchmarks/dashboard_bench.py --scale 0.1

clean:
	rm -rf $(VENV) build *.egg-info demo-data artifacts
