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

# `make demo` opens the quickstart notebook in JupyterLab; `make demo DEMO_CHECK=1` runs it
# headless with nbclient instead and exits 0 when every cell ran.
DEMO_NOTEBOOK ?= notebooks/01-quickstart.ipynb
DEMO_CHECK    ?=

# The lab extra (JupyterLab + widgets) is part of the test extra: a .venv that `make test`
# installed since the last change to pyproject.toml is reused as it is.
$(VENV)/.installed-lab: $(VENV)/bin/python pyproject.toml
	@if [ -f $(VENV)/.installed-test ] && [ $(VENV)/.installed-test -nt pyproject.toml ]; then \
		echo "demo: reusing $(VENV) (its test extra includes JupyterLab and the widgets)"; \
	else \
		echo "$(PY) -m pip install --quiet -e \".[lab]\""; \
		$(PY) -m pip install --quiet -e ".[lab]"; \
	fi
	$(MAKE) --no-print-directory warm
	touch $@

# Compile the numba kernels (forests, kernel smoothers) once so that later processes load
# them from the cache.
warm:
	$(PY) -c "import hedgerow.forest, hedgerow.kernels; hedgerow.forest.warm_up(); hedgerow.kernels.warm_up()"

venv: $(VENV)/.installed-test

demo: $(VENV)/.installed-lab
ifeq ($(DEMO_CHECK),1)
	$(PY) examples/run_notebook.py $(DEMO_NOTEBOOK)
else
	$(PY) -m jupyter lab $(DEMO_NOTEBOOK)
endif

lint: $(VENV)/.installed-test
	$(PY) -m ruff check .

test: $(VENV)/.installed-test
	$(PY) -m ruff check .
	$(PY) -m pytest -q -p no:cacheprovider

bench: $(VENV)/.installed-test
	$(PY) benchmarks/bench_fit.py

clean:
	rm -rf $(VENV) .pytest_cache .ruff_cache
