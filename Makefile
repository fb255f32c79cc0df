# One command to a running demo, one to the tests. Both set everything up on a fresh machine.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test test-fast bench install clean

$(STAMP): pyproject.toml setup.py
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip
	$(BIN)/python -m pip install -q -e '.[test]'
	@touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/remanence demo --host 127.0.0.1 --port 8000

test: $(STAMP)
	$(BIN)/python -m pytest

test-fast: $(STAMP)
	$(BIN)/python -m pytest -m "not slow and not browser"

bench: $(STAMP)
	$(BIN)/python -m bench

clean:
	rm -rf $(VENV) var .pytest_cache
