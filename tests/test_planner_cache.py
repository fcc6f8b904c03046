"""Plans are made once per world (by content digest) and shared; sweeps report planning apart."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from shortcut_gym.agents.planner import cache, plan_world
from shortcut_gym.agents.registry import make_agent
from shortcut_gym.agents.rollout import context_of_world
from shortcut_gym.envs import make_world
from shortcut_gym.lab.sweep.batch import simulate_users
from shortcut_gym.lab.sweep.plan import plan_runs
from shortcut_gym.lab.sweep.run import compute_run
from shortcut_gym.lab.sweep.runner import run_sweep
from shortcut_gym.lab.sweep.spec import parse_spec

SCHEDULE = {"sessions": 2, "trials_per_session": 10, "gap_h": 5.0}
PLANNER = {"name": "bounded_optimal", "n_bins": 8, "n_weight_bins": 3}


def _world(**changes):
    return make_world(schedule={**SCHEDULE, **changes.pop("schedule", {})}, **changes)


CHANGES = [
    {"schedule": {"gap_h": 6.0}},
    {"schedule": {"sessions": 3}},
    {"costs": "fast_typist_mouse"},
    {"memory": {"threshold": -2.0}},
    {"memory": "spacing"},
    {"aids": "nudge"},
    {"aids": "key_labels"},
    {"aids": "menu_delay"},
    {"aids": "menu_lockout"},
    {"aids": "warmup"},
    {"aids": {"nudge": {"commands": "all", "reading_s": 2.0}}},
    {"costs": {"noise": {"cv": 0.3}}},
    {"memory": {"weights": {"menu": 0.1}}},
    {"schedule": {"trial_interval_s": 30.0}},
    {"observe_recall": True},
    {"target_encoding": "index"},
]


@pytest.mark.parametrize("change", CHANGES, ids=[next(iter(c)) + str(i) for i, c in enumerate(CHANGES)])
def test_world_digest_is_equal_for_equal_worlds_and_differs_when_a_setting_does(change: dict) -> None:
    assert _world().digest() == _world().digest()
    assert _world(**change).digest() != _world().digest()


def test_cached_plan_is_made_once_per_world_and_equals_a_fresh_plan() -> None:
    cache.clear_plans()
    made = cache.plans_made()
    first = cache.cached_plan(_world(), 20, 8, None, 3)
    again = cache.cached_plan(_world(), 20, 8, None, 3)  # an equal world built anew
    other = cache.cached_plan(_world(memory={"threshold": -2.5}), 20, 8, None, 3)
    assert again is first and other is not first
    assert cache.plans_made() == made + 2
    fresh = plan_world(_world(), 20, 8, None, n_weight_bins=3)
    for a, b in zip(first.values, fresh.values, strict=True):
        np.testing.assert_array_equal(a, b)
    for a, b in zip(first.policy, fresh.policy, strict=True):
        np.testing.assert_array_equal(a, b)


def test_every_user_chunk_and_agent_of_a_world_shares_one_plan() -> None:
    cache.clear_plans()
    world = _world()
    made = cache.plans_made()
    simulate_users(world, PLANNER, range(6), chunk_users=2)  # three chunks of users
    simulate_users(world, PLANNER, range(6), chunk_users=3, threads=2)
    assert cache.plans_made() == made + 1
    agents = [make_agent("bounded_optimal", context_of_world(world), n_bins=8, n_weight_bins=3) for _ in range(2)]
    for a in agents:
        a.reset(0)
    assert agents[0].plan is agents[1].plan  # type: ignore[attr-defined]


def _spec(gap_h: float) -> dict:
    return {"name": "t", "base": {"schedule": {**SCHEDULE, "gap_h": gap_h}},
            "vary": {"design": "grid", "parameters": {"memory.threshold": {"values": [-3.0, -2.5]}}},
            "agents": [PLANNER, {"name": "always_menu"}], "seeds": {"first": 0, "count": 2},
            "outputs": {"plots": False}}


def test_compute_run_reports_planning_apart_and_only_for_the_first_run_of_a_world() -> None:
    cache.clear_plans()
    planner, menu = plan_runs(parse_spec(_spec(7.5)))[:2]
    first, second, fixed = compute_run(planner), compute_run({**planner, "run_id": "again"}), compute_run(menu)
    assert first["status"] == second["status"] == fixed["status"] == "done", first.get("error")
    assert 0.0 < first["plan_s"] <= first["compute_s"]
    assert second["plan_s"] == 0.0 and fixed["plan_s"] == 0.0
    assert first["blocks"]["time_s"].equals(second["blocks"]["time_s"])


def test_sweep_writes_plan_time_beside_compute_time(tmp_path: Path) -> None:
    cache.clear_plans()
    spec = _spec(9.0)
    report = run_sweep(spec, tmp_path / "s", workers=1, progress=False, write_outputs=False)
    metas = [json.loads(p.read_text()) for p in (tmp_path / "s" / "runs").glob("*/meta.json")]
    assert len(metas) == 4 and all(0.0 <= m["plan_s"] <= m["compute_s"] for m in metas)
    assert report.plan_s == pytest.approx(sum(m["plan_s"] for m in metas))
    assert report.compute_s == pytest.approx(sum(m["compute_s"] for m in metas))
    assert any("planning" in line for line in report.lines())
