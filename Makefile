# Two commands from nothing: `make demo` and `make test`. Each creates .venv if missing.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

# small dense matrices: one BLAS thread per process (see monitor/cli/__init__.py)
export OPENBLAS_NUM_THREADS ?= 1

.PHONY: demo test lint bench clean venv

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[postgres,mariadb,test]'
	touch $(STAMP)

venv: $(STAMP)

demo: $(STAMP)
	$(BIN)/convmon demo

test: $(STAMP)
	$(BIN)/python -m pytest monitor tests

lint: $(STAMP)
	$(BIN)/ruff check monitor tests sample_historian
	$(BIN)/ruff format --check monitor tests sample_historian
	$(BIN)/lint-imports

bench: $(STAMP)
	$(BIN)/python -m tests.benchmarks

clean:
	rm -rf $(VENV) build *.egg-info sample_historian/*.db var
