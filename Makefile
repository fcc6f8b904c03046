# Two commands: `make demo` (the main job on the demo scenario) and `make test`.
# Each creates .venv if missing (CPU torch 2.13.0 first), installs the project, and is idempotent.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed-stamp
OUT ?= out/demo
# every pip install goes through this: a download cut off by the network is tried again
PIP_RETRY := bash scripts/pip_retry.sh

# `make test-lowest`: a fresh venv with every direct dependency at the lower bound pyproject.toml
# declares (scripts/lowest_pins.py; torch is installed first as the CPU wheel 2.13.0, which is also its
# declared floor), checked to be those versions, then a fast subset of the tests.
LOWEST_VENV := .venv-lowest
# Fast subset (about 2 min of tests on 2 cores) touching every direct dependency: gymnasium (env,
# checker, wrappers, vector env), SB3 + torch (ppo/a2c/dqn, `train`, spec hyperparameters read from
# the SB3 signatures, the world record in the model zip), scipy (L-BFGS-B fits, milp assignment),
# threadpoolctl (fits), numba (kernel, planner solver, learning rules), pandas/pyarrow (parquet logs),
# pyyaml/pydantic (config validation), matplotlib (render, plots), tqdm (training).
LOWEST_TESTS := tests/test_world_env.py tests/test_world_config.py tests/test_world_memory.py \
	tests/test_world_observation.py tests/test_vector_env.py tests/test_world_wrappers.py \
	tests/test_world_render.py tests/test_sb3_ecosystem.py tests/test_lab_logs.py tests/test_sweep_spec.py \
	tests/test_cli_errors.py tests/test_cli_specs.py tests/test_cli_train.py tests/test_manners.py \
	tests/test_design_assignment.py tests/test_lab_fitting.py tests/test_agents_planner.py \
	tests/test_agents_learning.py tests/test_agents_rl.py::test_other_sb3_adapters_run_through_the_protocol \
	tests/test_model_world_record.py tests/test_sb3_spec_hyperparameters.py

.PHONY: setup demo test test-lowest lint typecheck bench docs clean clean-compiled

$(STAMP): pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PIP_RETRY) $(PY) -m pip install --quiet --upgrade pip
	$(PIP_RETRY) $(PY) -m pip install --quiet torch==2.13.0
	$(PIP_RETRY) $(PY) -m pip install --quiet -e ".[test]"
	touch $(STAMP)

setup: $(STAMP)

demo: $(STAMP)
	PYTHONPATH=examples $(PY) -m demo.run --out $(OUT)

test: $(STAMP)
	$(VENV)/bin/ruff check .
	$(PY) scripts/typecheck.py
	$(VENV)/bin/pytest -n 2 -q

test-lowest:
	rm -rf $(LOWEST_VENV)
	$(PYTHON) -m venv $(LOWEST_VENV)
	$(PIP_RETRY) $(LOWEST_VENV)/bin/python -m pip install --quiet --upgrade pip
	$(PIP_RETRY) $(LOWEST_VENV)/bin/python -m pip install --quiet torch==2.13.0
	$(PYTHON) scripts/lowest_pins.py --extra rl > $(LOWEST_VENV)/lowest-pins.txt
	$(PIP_RETRY) $(LOWEST_VENV)/bin/python -m pip install --quiet -c $(LOWEST_VENV)/lowest-pins.txt -e ".[rl]" \
		"pytest>=8" "pytest-xdist>=3.5" "hypothesis>=6.100"
	$(LOWEST_VENV)/bin/python scripts/lowest_pins.py --extra rl --check
	$(LOWEST_VENV)/bin/pytest -n 2 -q $(LOWEST_TESTS)

lint: $(STAMP)
	$(VENV)/bin/ruff check .

typecheck: $(STAMP)
	$(PY) scripts/typecheck.py

bench: $(STAMP)
	for s in scripts/bench_*.py; do echo "== $$s"; $(PY) $$s || exit 1; done

docs: $(STAMP)
	$(PY) scripts/build_api_docs.py site/api

clean:
	rm -rf $(VENV) $(LOWEST_VENV) out site build *.egg-info

clean-compiled:
	find . -path ./$(VENV) -prune -o -path ./$(LOWEST_VENV) -prune -o \( -name '*.nbi' -o -name '*.nbc' \) -type f -exec rm -f {} +
