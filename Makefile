# Every target builds .venv on first use, so each works as the first command on a fresh machine.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip
	$(BIN)/python -m pip install -q -e '.[test]'
	touch $(STAMP)

# Lint (ruff) and types (mypy) of both packages; their settings are in pyproject.toml.
lint: $(STAMP)
	$(BIN)/ruff check bucketing audit tests
	$(BIN)/python -m mypy

demo: $(STAMP)
	$(BIN)/sortition demo --out demo-output

# The tests drive a real headless browser and run Apache Spark in local mode;
# scripts/system-tools.sh installs Debian's chromium and Java 17 when they are
# missing (as root), or says what to install.
test: $(STAMP)
	bash scripts/system-tools.sh chromium java
	$(BIN)/python -m pytest

bench: $(STAMP)
	$(BIN)/python -m tests.bench

clean:
	rm -rf $(VENV) demo-output .pytest_cache .hypothesis
