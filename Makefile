# Two commands do all the set-up on a fresh machine:
#   make demo   - the main job on the embedded default (simulated probes -> SQLite)
#   make test   - the whole test suite, with a real mosquitto and victoria-metrics
PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python

.PHONY: demo test bench venv services clean

$(VENV)/.installed: pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e '.[test]'
	touch $@

venv: $(VENV)/.installed

services:
	bash .ci/ensure-services

demo: venv
	$(PY) -m probeflow demo

test: venv services
	$(PY) -m pytest -q

bench: venv services
	bash bench/run_all.sh

clean:
	rm -rf $(VENV) data build *.egg-info
