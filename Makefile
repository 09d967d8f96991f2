# Two commands set everything up on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test install bench clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,cnn]'
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/augplan demo

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	for b in benchmarks/bench_*.py; do $(BIN)/python $$b || exit 1; done

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
