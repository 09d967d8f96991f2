# Two commands set everything up on a fresh machine: `make demo` and `make test`.
# Both install from constraints.txt, the exact versions the suite last passed
# with; `make constraints` refreshes that file (newest versions, full suite).
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
EXTRAS := test,cnn
CONSTRAINTS := $(CURDIR)/constraints.txt
# PIP_CONSTRAINT as well as -c, so the isolated build of the editable install
# takes the same setuptools.
PIP_PINNED := PIP_CONSTRAINT=$(CONSTRAINTS) $(BIN)/python -m pip
REFRESH := .venv-refresh

.PHONY: demo test install bench constraints clean

$(STAMP): pyproject.toml constraints.txt
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(PIP_PINNED) install --quiet -c $(CONSTRAINTS) --upgrade pip
	$(PIP_PINNED) install --quiet -c $(CONSTRAINTS) -e '.[$(EXTRAS)]'
	touch $(STAMP)

install: $(STAMP)

# The demo's naive recipe has steps that break labels on purpose, so vet's
# exit 1 (it changed a recipe) is the demo's expected outcome; 2 or more fails.
demo: $(STAMP)
	$(BIN)/augplan demo || [ $$? -eq 1 ]

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	for b in benchmarks/bench_*.py; do $(BIN)/python $$b || exit 1; done

# The newest releases the open ranges of pyproject.toml admit, the whole
# suite on them, and only then the new constraints.txt.
constraints:
	rm -rf $(REFRESH)
	$(PYTHON) -m venv $(REFRESH)
	$(REFRESH)/bin/python -m pip install --quiet --upgrade pip
	$(REFRESH)/bin/python -m pip install --quiet -e '.[$(EXTRAS)]'
	$(REFRESH)/bin/python -m pytest
	{ sed -n '1,2p' constraints.txt; \
	  $(REFRESH)/bin/python -m pip freeze --all --exclude-editable \
	    | sed 's/^torch==\([0-9.]*\)+cpu$$/torch==\1/'; } > constraints.txt.new
	mv constraints.txt.new constraints.txt
	rm -rf $(REFRESH)

clean:
	rm -rf $(VENV) $(REFRESH) build *.egg-info .pytest_cache
