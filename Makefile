# Two commands set everything up on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: test demo bench lint clean

$(STAMP): pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test,report,fit]'
	touch $(STAMP)

test: $(STAMP)
	$(PY) -m pytest -q

demo: $(STAMP)
	$(PY) -m rigloop demo

bench: $(STAMP)
	for f in tools/bench/*.py; do echo "== $$f"; $(PY) $$f || exit 1; done

lint: $(STAMP)
	$(PY) -m pip install --quiet ruff
	$(VENV)/bin/ruff check rigloop tests tools

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
