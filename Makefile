# Two commands do all set-up on a fresh machine:
#   make demo   — installs the solver if missing, runs the whole job on the bundled example (see README)
#   make test   — installs the test packages if missing (solver, EGL, SLURM, browser), starts a
#                 single-node SLURM when there is none, runs the test suite
VENV    ?= .venv
PYTHON  ?= python3
PY      := $(VENV)/bin/python
STAMP   := $(VENV)/.installed
DEMO_OUT ?= runs/demo

.PHONY: demo test test-fast bench clean debian-demo debian-test

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[dev]'
	touch $(STAMP)

# The Debian packages first: installed when root or with password-less sudo
# (each command printed), else a stop at once with the exact command.
debian-demo:
	@tools/debian-packages.sh demo

debian-test:
	@tools/debian-packages.sh test
	@if [ "$$(id -u)" = 0 ]; then tools/slurm-up.sh || echo "make test: no local SLURM: the slurm tests will be skipped"; \
	elif command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then echo "+ sudo -n tools/slurm-up.sh"; \
	  sudo -n tools/slurm-up.sh || echo "make test: no local SLURM: the slurm tests will be skipped"; fi

test: debian-test $(STAMP)
	$(PY) -m pytest -q

test-fast: $(STAMP)
	$(PY) -m pytest -q -m "not solver and not slow and not slurm"

demo: debian-demo $(STAMP)
	$(PY) example_cases/run_demo.py --out $(DEMO_OUT)

bench: $(STAMP)
	$(PY) tests/benchmarks/run_all.py

clean:
	rm -rf $(VENV) runs build dist *.egg-info
