# filamant: `make demo` and `make test` each create .venv, install the project, and run.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test lint bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/python -m studies.demo

test: $(STAMP)
	$(BIN)/ruff check sweeps surrogates studies tests benchmarks
	$(BIN)/python -m pytest -q

lint: $(STAMP)
	$(BIN)/ruff check sweeps surrogates studies tests benchmarks

bench: $(STAMP)
	$(BIN)/filamant bench

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
