# Two commands: `make demo` (the main job on the demo scenario) and `make test`.
# Each creates .venv if missing (CPU torch 2.13.0 first), installs the project, and is idempotent.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed-stamp
OUT ?= out/demo

.PHONY: setup demo test lint typecheck bench docs clean

$(STAMP): pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet torch==2.13.0
	$(PY) -m pip install --quiet -e ".[test]"
	touch $(STAMP)

setup: $(STAMP)

demo: $(STAMP)
	PYTHONPATH=examples $(PY) -m demo.run --out $(OUT)

test: $(STAMP)
	$(VENV)/bin/ruff check .
	$(PY) scripts/typecheck.py
	$(VENV)/bin/pytest -n 2 -q

lint: $(STAMP)
	$(VENV)/bin/ruff check .

typecheck: $(STAMP)
	$(PY) scripts/typecheck.py

bench: $(STAMP)
	for s in scripts/bench_*.py; do echo "== $$s"; $(PY) $$s || exit 1; done

docs: $(STAMP)
	$(PY) scripts/build_api_docs.py site/api

clean:
	rm -rf $(VENV) out site build *.egg-info
