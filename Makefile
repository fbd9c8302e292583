# Two entry points for people: `make demo` and `make test`. Both bootstrap .venv.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed-$(EXTRAS)

.PHONY: demo test lint bench warm clean venv

$(VENV)/bin/python:
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip

$(VENV)/.installed-test: $(VENV)/bin/python pyproject.toml
	$(PY) -m pip install --quiet -e ".[test]"
	$(MAKE) --no-print-directory warm
	touch $@

$(VENV)/.installed-demo: $(VENV)/bin/python pyproject.toml
	$(PY) -m pip install --quiet -e .
	$(MAKE) --no-print-directory warm
	touch $@

# Compile the numba kernels once so that later processes load them from the cache.
warm:
	$(PY) -c "import hedgerow.forest; hedgerow.forest.warm_up()"

venv: $(VENV)/.installed-test

demo: $(VENV)/.installed-demo
	$(PY) examples/demo_fit.py

lint: $(VENV)/.installed-test
	$(PY) -m ruff check .

test: $(VENV)/.installed-test
	$(PY) -m ruff check .
	$(PY) -m pytest -q -p no:cacheprovider

bench: $(VENV)/.installed-test
	$(PY) benchmarks/bench_fit.py

clean:
	rm -rf $(VENV) .pytest_cache .ruff_cache
