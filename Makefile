# Two commands set everything up on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,reference,cluster]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/mdgas demo

test: $(STAMP)
	$(BIN)/python -m pytest -q tests --ignore=tests/benchmarks

bench: $(STAMP)
	$(BIN)/python tests/benchmarks/run_all.py

clean:
	rm -rf $(VENV) build *.egg-info
