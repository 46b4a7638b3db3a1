# Two commands do all set-up on a fresh machine (Python 3.11, pip, make):
#   make demo   - create .venv if needed, install chairqm, run the demo configuration
#   make test   - same install, then the test suite (slow end-to-end cases included)
PYTHON ?= python3.11
VENV   ?= .venv
BIN     = $(VENV)/bin
CORES  ?= 2
OUT    ?= results/demo
PYTEST_ARGS ?=

.PHONY: demo test test-fast install clean

$(BIN)/python:
	@command -v $(PYTHON) >/dev/null 2>&1 || { echo "need $(PYTHON) on PATH (or run: make PYTHON=python3 ...)"; exit 1; }
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(VENV)/.installed: pyproject.toml Makefile $(BIN)/python
	$(BIN)/python -m pip install --quiet -e ".[test,dft,slurm]"
	@touch $@

install: $(VENV)/.installed

demo: install
	OMP_NUM_THREADS=1 $(BIN)/chairqm run configs/demo.yaml --out $(OUT) --cores $(CORES)
	@echo "demo results: $(OUT)"

test: install
	OMP_NUM_THREADS=1 $(BIN)/python -m pytest $(PYTEST_ARGS)

test-fast: install
	OMP_NUM_THREADS=1 $(BIN)/python -m pytest -m "not slow" $(PYTEST_ARGS)

clean:
	rm -rf results .pytest_cache
