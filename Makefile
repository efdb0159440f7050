# The README's two set-up commands are `make demo` and `make test`; both create
# .venv with the machine's Python 3.11 and install tumble into it.
PYTHON ?= $(shell command -v python3.11 2>/dev/null || command -v python3)
VENV := .venv
BIN := $(VENV)/bin

.PHONY: demo test test-slow bench install install-test clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

install: $(BIN)/python
	$(BIN)/python -m pip install --quiet -e .

install-test: $(BIN)/python
	$(BIN)/python -m pip install --quiet -e ".[test]"

demo: install
	$(BIN)/python catalogs_demo/run_demo.py

# one BLAS thread per process: the suite's small solves slow down badly with two threads on two shared cores
test: install-test
	OPENBLAS_NUM_THREADS=1 $(BIN)/python -m pytest

test-slow: install-test
	OPENBLAS_NUM_THREADS=1 $(BIN)/python -m pytest -m slow

bench: install-test
	$(BIN)/python -m pip install --quiet -e ".[test,bench]"
	for b in benchmarks/bench_*.py; do OPENBLAS_NUM_THREADS=1 $(BIN)/python $$b || exit 1; done

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache demo_out
