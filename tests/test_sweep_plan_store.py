"""The on-disk plan store: sweep workers share one plan per world; damaged entries are planned again."""

from __future__ import annotations

import json
import logging
import pickle
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents.planner import cache, plan_store, plan_world
from shortcut_gym.envs import make_world
from shortcut_gym.lab.sweep.outputs import without_cost_columns
from shortcut_gym.lab.sweep.runner import run_sweep

SCHEDULE = {"sessions": 2, "trials_per_session": 10, "gap_h": 5.0}
PLANNER = {"name": "bounded_optimal", "params": {"n_bins": 8, "n_weight_bins": 3}}


def _spec(thresholds: list[float], planners: int) -> dict[str, Any]:
    """Each point's world is planned by ``planners`` agent entries of the same options (same plan)."""
    agents = [{**PLANNER, "label": f"planner_{i}"} for i in range(planners)] + [{"name": "always_menu"}]
    return {"name": "plan_store_test", "base": {"schedule": SCHEDULE},
            "vary": {"design": "grid", "parameters": {"memory.threshold": {"values": thresholds}}},
            "agents": agents, "seeds": {"first": 3, "count": 3}, "outputs": {"plots": False}}


def _tables(folder: Path) -> tuple[pd.DataFrame, ...]:
    return (pd.read_parquet(folder / "results.parquet"), pd.read_parquet(folder / "commands.parquet"),
            without_cost_columns(pd.read_csv(folder / "summary.csv")))


def _assert_same_tables(a: Path, b: Path) -> None:
    for x, y in zip(_tables(a), _tables(b), strict=True):
        pd.testing.assert_frame_equal(x, y, check_exact=True)


def _metas(folder: Path) -> list[dict[str, Any]]:
    return [json.loads(p.read_text()) for p in (folder / "runs").glob("*/meta.json")]


def test_two_workers_plan_each_distinct_world_once_and_match_one_process(tmp_path: Path) -> None:
    spec = _spec([-3.0, -2.4], planners=4)  # 2 worlds, 8 planner runs, 2 menu runs
    cache.clear_plans()  # forked workers start with no plan in memory
    two = run_sweep(spec, tmp_path / "two", workers=2, progress=False, keep_plans=True)
    assert two.computed == 10 and not two.failed
    metas = _metas(tmp_path / "two")
    assert len({m["pid"] for m in metas}) == 2  # both workers computed runs
    assert sum(m["plans_made"] for m in metas) == two.plans_made == 2
    assert sum(m["plans_loaded"] for m in metas) == two.plans_loaded
    assert len(list((tmp_path / "two" / "plans").glob("*.plan"))) == 2
    assert all(0.0 <= m["plan_s"] <= m["compute_s"] for m in metas)
    assert two.plan_s == pytest.approx(sum(m["plan_s"] for m in metas)) and two.plan_s > 0.0
    assert any("2 plan(s) made" in line for line in two.lines())

    cache.clear_plans()
    one = run_sweep(spec, tmp_path / "one", workers=1, progress=False)
    assert one.plans_made == 2 and one.plans_loaded == 0
    _assert_same_tables(tmp_path / "one", tmp_path / "two")
    # the four planner labels share a plan, and the planner differs from the menu (not vacuous)
    users = _tables(tmp_path / "one")[2]
    per_agent = users.groupby("agent")["total_time_s"].mean()
    assert per_agent.filter(like="planner_").nunique() == 1
    assert per_agent["always_menu"] != per_agent["planner_0"]


def _truncate(path: Path) -> None:
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


def test_damaged_entries_are_planned_again_rewritten_and_results_unchanged(tmp_path: Path,
                                                                          caplog: pytest.LogCaptureFixture) -> None:
    spec = _spec([-3.0, -2.6, -2.2], planners=1)
    shared = tmp_path / "shared_plans"
    cache.clear_plans()
    first = run_sweep(spec, tmp_path / "a", workers=1, progress=False, plan_store=shared)
    assert first.plans_made == 3
    entries = sorted(shared.glob("*.plan"))
    assert len(entries) == 3 and not (tmp_path / "a" / "plans").exists()
    original = {p: p.read_bytes() for p in entries}
    _truncate(entries[0])
    entries[1].write_bytes(original[entries[2]])  # a valid entry of another world under this name
    cache.clear_plans()
    with caplog.at_level(logging.WARNING, logger=plan_store.__name__):
        again = run_sweep(spec, tmp_path / "b", workers=1, progress=False, plan_store=shared)
    assert again.plans_made == 2 and again.plans_loaded == 1 and not again.failed
    warnings = [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING]
    assert len(warnings) == 2 and all("planning again" in w for w in warnings)
    assert any("payload bytes" in w for w in warnings) and any("another key" in w for w in warnings)
    _assert_same_tables(tmp_path / "a", tmp_path / "b")
    # rewritten: the entries are whole again (same bytes as first written), the damaged ones set aside
    assert {p: p.read_bytes() for p in entries} == original
    assert len(list(shared.glob("*.damaged-*"))) == 2


def _entry_bytes() -> tuple[tuple, bytes, Any]:
    world = make_world(schedule=SCHEDULE)
    key = cache.plan_key(world, world.horizon, 8, None, 3, 16)
    plan = plan_world(world, world.horizon, 8, None, n_weight_bins=3, select_users=16)
    return key, plan_store.encode(key, plan), plan


DAMAGES = {
    "empty": lambda b: b"",
    "header only": lambda b: b.partition(b"\n")[0] + b"\n",
    "one byte short": lambda b: b[:-1],
    "one byte more": lambda b: b + b"\0",
    "payload byte flipped": lambda b: b[:-10] + bytes([b[-10] ^ 0xFF]) + b[-9:],
    "header garbage": lambda b: b"\x00garbage" + b[20:],
}


@pytest.mark.parametrize("damage", list(DAMAGES))
def test_every_damaged_entry_is_refused_and_set_aside(tmp_path: Path, damage: str) -> None:
    key, data, plan = _entry_bytes()
    path = plan_store.entry_path(tmp_path, key)
    path.write_bytes(data)
    whole = plan_store.load(tmp_path, key)
    assert whole is not None
    for a, b in zip(whole.policy, plan.policy, strict=True):
        np.testing.assert_array_equal(a, b)
    path.write_bytes(DAMAGES[damage](data))
    with pytest.raises(plan_store.DamagedPlanEntry):
        plan_store.decode(path.read_bytes(), key)
    assert plan_store.load(tmp_path, key) is None  # the caller plans again
    assert not path.exists() and len(list(tmp_path.glob("*.damaged-*"))) == 1


def test_save_is_atomic_and_leaves_no_temporary_file(tmp_path: Path) -> None:
    key, data, plan = _entry_bytes()
    path = plan_store.save(tmp_path, key, plan)
    assert path.read_bytes() == data
    assert [p.name for p in tmp_path.iterdir()] == [path.name]


def test_an_entry_stores_transitions_by_their_nonzeros_and_loads_every_array_bit_for_bit() -> None:
    key, data, plan = _entry_bytes()
    loaded = plan_store.decode(data, key)
    assert len(data) < 0.75 * len(pickle.dumps(plan, protocol=pickle.HIGHEST_PROTOCOL))  # 8 bins: dense-ish
    for ours, theirs in zip(loaded.mdps, plan.mdps, strict=True):
        for name in ("P", "R", "activation", "p_recall", "weight", "activation_grid", "weight_grid"):
            a, b = getattr(ours, name), getattr(theirs, name)
            assert a.dtype == b.dtype and a.shape == b.shape and a.tobytes() == b.tobytes(), name
        assert ours.command == theirs.command and ours.grid().n_act == theirs.grid().n_act  # cache rebuilt
    for a, b in zip(loaded.values + loaded.policy, plan.values + plan.policy, strict=True):
        assert a.tobytes() == b.tobytes()
    assert loaded.choice == plan.choice and loaded.keyboard_share == plan.keyboard_share
