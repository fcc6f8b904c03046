"""Backends: local (1 and 2 workers) and Ray give identical tables; failures are recorded; bad addresses fail fast."""

from __future__ import annotations

import json
import os
import time
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents.base import Agent
from shortcut_gym.agents.registry import AGENTS
from shortcut_gym.lab.sweep.backends import BackendError, parse_ray_address
from shortcut_gym.lab.sweep.outputs import without_cost_columns
from shortcut_gym.lab.sweep.runner import run_sweep

SPEC: dict[str, Any] = {
    "name": "backend_test",
    "base": {"schedule": {"sessions": 3, "trials_per_session": 10}},
    "vary": {"design": "lhs", "points": 3, "seed": 4, "parameters": {
        "costs.klm.keystroke_s": {"low": 0.08, "high": 1.2},
        "costs.learn.encoding_s": {"low": 0.5, "high": 20.0, "scale": "log"},
    }},
    "agents": [{"name": "always_menu"}, {"name": "learn_first_k", "params": {"k": 1}},
               {"name": "random", "params": {"p_hotkey": 0.3, "p_learn": 0.1}}, {"name": "rescorla_wagner"},
               {"name": "composed_learner", "mechanisms": ["value", "memory_aware", "planning", "lapse"]}],
    "seeds": {"first": 10, "count": 5},
    "outputs": {"plots": False},
}


def _tables(folder: Path) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    return (pd.read_parquet(folder / "results.parquet"), pd.read_parquet(folder / "commands.parquet"),
            without_cost_columns(pd.read_csv(folder / "summary.csv")))


def test_local_one_and_two_workers_and_ray_give_identical_tables(tmp_path: Path) -> None:
    one = run_sweep(SPEC, tmp_path / "one", workers=1, progress=False)
    two = run_sweep(SPEC, tmp_path / "two", workers=2, progress=False)
    ray_report = run_sweep(SPEC, tmp_path / "ray", backend="ray", workers=2, progress=False)
    assert one.computed == two.computed == ray_report.computed == 15  # 3 points x 5 agents
    ref = _tables(tmp_path / "one")
    assert len(ref[0]) == 15 * 3 and ref[0]["run_id"].nunique() == 15
    for other in ("two", "ray"):
        for a, b in zip(ref, _tables(tmp_path / other), strict=True):
            pd.testing.assert_frame_equal(a, b, check_exact=True)
    pids = {json.loads((p / "meta.json").read_text())["pid"] for p in (tmp_path / "two" / "runs").iterdir()}
    assert os.getpid() not in pids  # two workers: computed in worker processes
    # different agents really differ (the comparison is not vacuous)
    times = ref[2].groupby("agent")["total_time_s"].mean()
    assert times.nunique() == len(times)


def test_unreachable_ray_address_fails_fast_and_writes_nothing(tmp_path: Path) -> None:
    start = time.perf_counter()
    with pytest.raises(BackendError, match=r"cannot reach the Ray cluster at '127\.0\.0\.1:9'"):
        run_sweep(SPEC, tmp_path / "x", backend="ray", address="127.0.0.1:9", progress=False)
    assert time.perf_counter() - start < 10
    assert not (tmp_path / "x").exists()
    with pytest.raises(BackendError, match="must look like host:port"):
        parse_ray_address("nohostport")
    with pytest.raises(BackendError, match="unknown backend 'slurm'"):
        run_sweep(SPEC, tmp_path / "y", backend="slurm", progress=False)
    with pytest.raises(BackendError, match="workers must be"):
        run_sweep(SPEC, tmp_path / "y", workers=0, progress=False)
    assert not (tmp_path / "y").exists()


class _Exploding(Agent):
    """Test agent that raises on its third trial."""

    name = "_test_exploding"

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        self.calls = 0

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        self.calls += 1
        if self.calls == 3:
            raise ArithmeticError("the test agent gives up on trial 3")
        return np.array([1.0, 0.0, 0.0])


@pytest.mark.parametrize("workers", [1, 2])
def test_a_failing_run_is_recorded_and_the_others_finish(tmp_path: Path, workers: int, monkeypatch) -> None:
    monkeypatch.setitem(AGENTS, _Exploding.name, _Exploding)  # registered for this test only
    spec = {**SPEC, "agents": [{"name": "always_menu"}, {"name": _Exploding.name}]}
    report = run_sweep(spec, tmp_path / "s", workers=workers, progress=False)
    assert len(report.failed) == 3 and report.computed == 6
    assert all("ArithmeticError: the test agent gives up on trial 3" in f["error"] for f in report.failed)
    fails = pd.read_csv(tmp_path / "s" / "failures.csv")
    assert len(fails) == 3 and fails["error"].str.contains("trial 3").all()
    res = pd.read_parquet(tmp_path / "s" / "results.parquet")
    assert set(res["agent"]) == {"always_menu"} and res["run_id"].nunique() == 3
    manifest = json.loads((tmp_path / "s" / "manifest.json").read_text())
    assert manifest["status"] == {"done": 3, "failed": 3, "pending": 0}
    index = (tmp_path / "s" / "index.md").read_text()
    assert "6 runs planned; 3 finished, 3 failed." in index and "- `failures.csv`: runs that raised" in index
    again = run_sweep(spec, tmp_path / "s", workers=workers, progress=False)  # failures kept, not rerun
    assert again.computed == 0 and again.kept == 3 and len(again.failed) == 3
    retried = run_sweep(spec, tmp_path / "s", workers=workers, progress=False, retry_failed=True)
    assert retried.computed == 3 and len(retried.failed) == 3
