# Every target bootstraps a local virtual environment (idempotently) before it runs.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test lint docs oldest bench warmup clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test,tools,docs,lint]"
	$(BIN)/python -m rtrace.run.warmup
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/rtrace demo --output demo-output

# the tests, with the coverage of rtrace/'s Python lines (below 90% fails; see [tool.coverage] in pyproject.toml)
test: $(STAMP)
	$(BIN)/python -m pytest -n 2 -q --cov=rtrace --cov-report=term

# ruff's formatting and checks (configured in pyproject.toml); `ruff format <paths>` fixes the first
lint: $(STAMP)
	$(BIN)/ruff format --check rtrace tests benchmarks examples tools docs
	$(BIN)/ruff check rtrace tests benchmarks examples tools docs

# the documentation (docs/_build/html): runs the examples for the gallery first; any warning fails it
docs: $(STAMP)
	rm -rf docs/generated
	$(BIN)/python docs/gallery.py
	$(BIN)/python -m sphinx -W --keep-going -q -b html docs docs/_build/html

# the tests with the oldest dependency versions pyproject.toml allows (in .venv-oldest)
oldest:
	test -x .venv-oldest/bin/python || $(PYTHON) -m venv .venv-oldest
	.venv-oldest/bin/python -m pip install --quiet --upgrade pip
	$(PYTHON) tools/oldest_requirements.py > .venv-oldest/constraints.txt
	.venv-oldest/bin/python -m pip install --quiet -c .venv-oldest/constraints.txt -e ".[test,tools]"
	.venv-oldest/bin/python -m pytest -n 2 -q -p no:cacheprovider

# compile the numba kernels into their cache again (after editing a kernel module)
warmup: $(STAMP)
	$(BIN)/python -m rtrace.run.warmup

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_engine.py

clean:
	rm -rf $(VENV) .venv-oldest demo-output .pytest_cache docs/_build docs/_gallery docs/generated
