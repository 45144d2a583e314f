# Everything runs from .venv, created here on first use; nothing needs installing by hand.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench schema clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/assignplan solve examples/institute-week.json

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/run.py

schema: $(STAMP)
	$(BIN)/assignplan schema --out schemas/

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
