# Two commands a new user needs: `make demo` and `make test`. Both create .venv when missing.
# `make docs` builds the documentation site into docs/_build/html (offline, warnings are errors).
PYTHON ?= python3.11
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: demo test bench bench-scale docs install clean

$(PY):
	@command -v $(PYTHON) >/dev/null 2>&1 || { echo "Python 3.11 not found as '$(PYTHON)'; run: make PYTHON=/path/to/python3.11 $(MAKECMDGOALS)"; exit 2; }
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip

$(STAMP): $(PY) pyproject.toml
	$(PY) -m pip install --quiet -e ".[test,docs]"
	@# torch is optional; use the local CPU wheel when the machine has one (never pull a multi-GB GPU build)
	@w=$$(ls /opt/wheels/torch-*+cpu-cp311-*.whl 2>/dev/null | head -n 1); \
	  if [ -n "$$w" ]; then $(PY) -m pip install --quiet "$$w"; \
	  else echo "torch CPU wheel not found: the optional DataLoader tests will be skipped"; fi
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/tilewright demo demo-out

test: $(STAMP)
	@# the layers and cycles contracts of pyproject.toml: a wrong-way import fails here, named
	$(VENV)/bin/lint-imports --no-cache
	$(PY) -m pytest -q

bench: $(STAMP)
	$(PY) benchmarks/run_all.py
	$(PY) benchmarks/scale.py --sizes 100 1000

# the scale benchmark with a 10,000-slide cohort too: ~45 min and ~12 GB in bench-out/scale on 2 cores
bench-scale: $(STAMP)
	$(PY) benchmarks/scale.py --sizes 100 1000 10000

docs: $(STAMP)
	$(PY) -m sphinx -W --keep-going -q -b html docs docs/_build/html
	@echo "docs: open docs/_build/html/index.html"

clean:
	rm -rf $(VENV) demo-out .pytest_cache docs/_build docs/api/generated
