# Two-command set-up: every target that runs code first makes .venv/ in this checkout.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench fuzz clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/labtool demo

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	$(BIN)/python -m benchmarks

fuzz: $(STAMP)
	$(BIN)/python -m tests.fuzz_long

clean:
	rm -rf $(VENV) build *.egg-info demo_out
