"""Bad input and misuse raise the package's own errors: a source walk finds every plain
``raise ValueError(`` / ``raise RuntimeError(`` outside pydantic validators and refuses it unless the
line is marked ``# invariant`` (a bug of the package if hit); a sample of each kind of mistake
raises a :class:`ShortcutGymError` that is still the ValueError or RuntimeError it was before."""

from __future__ import annotations

import ast
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.envs.errors import (
    ConfigError,
    DataError,
    NotReadyError,
    ShortcutGymError,
    UsageError,
)

ROOT = Path(__file__).resolve().parents[1]
PLAIN = {"ValueError", "RuntimeError"}
#: pydantic wraps what these raise into a ValidationError, which envs/config.py turns into ConfigError.
VALIDATORS = {"field_validator", "model_validator", "validator", "root_validator"}
MARKER = "# invariant"


def _decorators(fn: ast.FunctionDef | ast.AsyncFunctionDef) -> set[str]:
    names = set()
    for d in fn.decorator_list:
        target = d.func if isinstance(d, ast.Call) else d
        names.add(target.attr if isinstance(target, ast.Attribute) else getattr(target, "id", ""))
    return names


def unmarked_plain_raises(source: str, label: str) -> list[str]:
    """``label:line`` of each plain ValueError/RuntimeError raised outside a validator, unmarked."""
    lines = source.splitlines()
    found: list[str] = []

    def walk(node: ast.AST, in_validator: bool) -> None:
        for child in ast.iter_child_nodes(node):
            inside = in_validator
            if isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef)):
                inside = in_validator or bool(_decorators(child) & VALIDATORS)
            if isinstance(child, ast.Raise) and child.exc is not None and not inside:
                exc = child.exc.func if isinstance(child.exc, ast.Call) else child.exc
                if isinstance(exc, ast.Name) and exc.id in PLAIN and MARKER not in lines[child.lineno - 1]:
                    found.append(f"{label}:{child.lineno}")
            walk(child, inside)

    walk(ast.parse(source), False)
    return found


def test_the_package_raises_its_own_errors_for_bad_input() -> None:
    offenders = []
    for layer in ("envs", "agents", "lab"):
        for path in sorted((ROOT / layer).rglob("*.py")):
            offenders += unmarked_plain_raises(path.read_text(), str(path.relative_to(ROOT)))
    assert not offenders, ("raise a ShortcutGymError subclass, or mark an internal invariant with "
                           f"'{MARKER}': {offenders}")


def test_the_walk_sees_plain_raises_and_honours_validators_and_the_marker() -> None:
    src = ("from pydantic import field_validator\n"
           "def f(x):\n    if x:\n        raise ValueError('bad')\n"
           "    raise RuntimeError('twice')  # invariant: cannot happen\n"
           "class M:\n    @field_validator('a')\n    def check(cls, v):\n        raise ValueError('wrapped')\n"
           "def g():\n    raise RuntimeError\n")
    assert unmarked_plain_raises(src, "m.py") == ["m.py:4", "m.py:11"]


def test_simulator_misuse_and_bad_arguments() -> None:
    from shortcut_gym.envs.simulator import BatchSimulator
    from shortcut_gym.envs.world import make_world

    sim = BatchSimulator(make_world(schedule={"sessions": 1, "trials_per_session": 4}))
    with pytest.raises(UsageError, match=r"call reset\(\) before step\(\)"):
        sim.step(np.zeros(1, dtype=np.int64))
    with pytest.raises(ConfigError, match="at least one user"):
        sim.reset(seeds=[])
    with pytest.raises(ValueError, match="at least one user"):  # still a ValueError for old callers
        sim.reset(seeds=[])


def test_agent_constructors_and_misuse() -> None:
    from shortcut_gym.agents.learning.agent import LearningAgent
    from shortcut_gym.agents.registry import make_agent

    with pytest.raises(ConfigError, match="unknown mechanism 'telepathy'"):  # the class itself, not make_agent
        LearningAgent(mechanisms=["value", "telepathy"])
    agent = make_agent("q_learning")
    with pytest.raises(NotReadyError, match="bind a context") as err:
        agent.reset(seed=0)
    assert isinstance(err.value, ValueError) and isinstance(err.value, UsageError)


def test_lab_functions_given_bad_tables_and_arguments() -> None:
    from shortcut_gym.lab.compare.bms import random_effects_bms
    from shortcut_gym.lab.fitting.joint import joint_table
    from shortcut_gym.lab.fitting.laplace_em import em_laplace

    with pytest.raises(DataError, match="non-finite"):
        random_effects_bms(np.array([[0.0, np.nan], [1.0, 2.0]]))
    with pytest.raises(DataError, match="lacks column"):
        joint_table(pd.DataFrame({"x": [1]}), pd.DataFrame({"y": [1]}))
    with pytest.raises(ShortcutGymError, match="n_starts and max_iterations must be >= 1"):
        em_laplace([lambda th: 0.0, lambda th: 0.0], [1, 1], np.zeros(1), n_starts=0)
