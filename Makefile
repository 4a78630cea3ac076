# Two commands do all set-up on a fresh machine:
#   make demo   — runs the whole job on the bundled example (see README)
#   make test   — runs the test suite
VENV    ?= .venv
PYTHON  ?= python3
PY      := $(VENV)/bin/python
STAMP   := $(VENV)/.installed
DEMO_OUT ?= runs/demo

.PHONY: demo test test-fast bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[dev]'
	touch $(STAMP)

test: $(STAMP)
	$(PY) -m pytest -q

test-fast: $(STAMP)
	$(PY) -m pytest -q -m "not solver and not slow"

demo: $(STAMP)
	$(PY) example_cases/run_demo.py --out $(DEMO_OUT)

bench: $(STAMP)
	$(PY) tests/benchmarks/run_all.py

clean:
	rm -rf $(VENV) runs build dist *.egg-info
