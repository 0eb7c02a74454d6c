# Two commands set everything up: `make demo` and `make test` (see README).
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

.PHONY: demo test bench clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --upgrade pip
	$(BIN)/python -m pip install -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/vfactor demo demo-output

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python -m pip install -e '.[test,bench]'
	$(BIN)/python scripts/bench_raytrace.py
	$(BIN)/python scripts/bench_viewfactors.py
	$(BIN)/python scripts/bench_heating.py
	$(BIN)/python scripts/bench_contacts.py
	$(BIN)/python scripts/bench_scale.py

clean:
	rm -rf $(VENV) demo-output .pytest_cache
