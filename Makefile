# Two commands on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.tem-installed

.PHONY: demo test bench install clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip
	$(BIN)/python -m pip install -q -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/tem demo --out demo-output

test: $(STAMP)
	MPLBACKEND=Agg $(BIN)/python -m pytest -q -n 2 --dist loadfile -p no:cacheprovider --durations=12

bench: $(STAMP)
	$(BIN)/python -m pip install -q -e '.[test,bench]'   # SimPEG, the forward benchmark's peer
	@for b in benchmarks/*.py; do MPLBACKEND=Agg $(BIN)/python $$b || exit 1; done

clean:
	rm -rf $(VENV) demo-output build *.egg-info
