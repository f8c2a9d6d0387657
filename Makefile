# Two commands set everything up on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: test browser demo bench lint clean

$(STAMP): pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test,report,fit]'
	touch $(STAMP)

# The dashboard's page test drives Debian's headless Chromium. Where it cannot be installed
# (no apt-get, not root, no package registry) nothing fails: that one test says so and is skipped.
browser:
	@test -x /usr/bin/chromium || { command -v apt-get >/dev/null && [ "$$(id -u)" = 0 ] && \
	  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null; } || \
	  echo "note: Debian's chromium could not be installed; the headless-browser test will be skipped"

test: $(STAMP) browser
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
