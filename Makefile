# tankside: `make demo` and `make test` each set up .venv on first use.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

# pip -qq: errors only; the rest of what pip prints on a first set-up is not for a newcomer.
PIP    := $(BIN)/python -m pip -qq

.PHONY: demo test bench lint typecheck clean setup

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	@echo "Installing tankside and its test tools into $(VENV) ..."
	@$(PIP) install --upgrade pip
	@$(PIP) install -e '.[test]'
	@touch $(STAMP)
	@echo "Ready: $(BIN)/tankside --help"

setup: $(STAMP)

demo: $(STAMP)
	$(BIN)/tankside demo

test: $(STAMP)
	$(BIN)/ruff check monitor drivers simulators tests
	$(BIN)/python tests/typecheck.py
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	for f in tests/bench/bench_*.py; do $(BIN)/python $$f || exit 1; done

lint: $(STAMP)
	$(BIN)/ruff check monitor drivers simulators tests

typecheck: $(STAMP)
	$(BIN)/python tests/typecheck.py

clean:
	rm -rf $(VENV) build *.egg-info .mypy_cache
