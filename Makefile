# Two entry points: `make run` (default demo) and `make test` (whole suite).
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: run test bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

run: $(STAMP)
	$(BIN)/deform demo

test: $(STAMP)
	$(BIN)/python -m pytest -n 2 -q tests

bench: $(STAMP)
	for f in tests/bench/bench_*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) .pytest_cache
