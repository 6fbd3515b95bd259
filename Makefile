# Every target bootstraps a local virtual environment (idempotently) before it runs.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench warmup clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test,tools]"
	$(BIN)/python -m rtrace.warmup
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/rtrace demo --output demo-output

test: $(STAMP)
	$(BIN)/python -m pytest -n 2 -q

# compile the numba kernels into their cache again (after editing a kernel module)
warmup: $(STAMP)
	$(BIN)/python -m rtrace.warmup

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_engine.py

clean:
	rm -rf $(VENV) demo-output .pytest_cache
