"""Waiting for another worker's plan is counted apart (plan_wait_s), so plan_s is the time spent
making or reading the plan; with two workers every world is made once and read by the other."""

from __future__ import annotations

import json
import threading
import time
from pathlib import Path
from typing import Any

import pytest

from shortcut_gym.agents.planner import cache, plan_store, plan_world
from shortcut_gym.envs import make_world
from shortcut_gym.lab.sweep.runner import run_sweep

SCHEDULE = {"sessions": 2, "trials_per_session": 8, "gap_h": 5.0}
PLANNER = {"name": "bounded_optimal", "params": {"n_bins": 8, "n_weight_bins": 3}}


def _someone_waits_on(lock_file: Path) -> bool:
    """Whether /proc/locks lists a blocked waiter ("->") on this file's inode."""
    inode = f":{lock_file.stat().st_ino} "
    return any("->" in line and inode in line for line in Path("/proc/locks").read_text().splitlines())


@pytest.mark.skipif(not Path("/proc/locks").exists(), reason="needs Linux /proc/locks to see the waiter")
@pytest.mark.parametrize("hold_s", [0.0, 0.2, 0.6])
def test_the_wait_for_a_held_entry_is_counted_apart_from_reading_it(tmp_path: Path, hold_s: float) -> None:
    world = make_world(schedule=SCHEDULE)
    key = cache.plan_key(world, world.horizon, 8, None, 3, cache.SELECTION_USERS)
    plan = plan_world(world, world.horizon, 8, None, n_weight_bins=3)
    cache.clear_plans()
    held, moments = threading.Event(), {}
    lock_file = tmp_path / f"{plan_store.entry_name(key)}.lock"

    def other_process() -> None:  # a second open of the lock file conflicts like another process's
        with plan_store.key_lock(tmp_path, key):
            held.set()
            while not _someone_waits_on(lock_file):  # the cache call is now blocked on this lock
                time.sleep(0.001)
            moments["blocked"] = time.perf_counter()
            time.sleep(hold_s)
            plan_store.save(tmp_path, key, plan)
            moments["released"] = time.perf_counter()

    holder = threading.Thread(target=other_process)
    holder.start()
    held.wait()
    made, loaded, waited = cache.plans_made(), cache.plans_loaded(), cache.waiting_seconds()
    start = time.perf_counter()
    with plan_store.using_plan_store(tmp_path):
        got, seconds = cache.timed_cached_plan(world, world.horizon, 8, None, 3)
    elapsed = time.perf_counter() - start
    holder.join()
    wait = cache.waiting_seconds() - waited
    assert cache.plans_made() == made and cache.plans_loaded() == loaded + 1  # read, not made
    # it was waiting before "blocked" and could not have the lock before "released"
    assert wait >= moments["released"] - moments["blocked"] >= hold_s
    assert 0.0 < seconds and seconds + wait <= elapsed  # reading, apart from waiting, within the call
    assert all((a == b).all() for a, b in zip(got.policy, plan.policy, strict=True))
    cache.clear_plans()


def _spec(thresholds: list[float], labels: int) -> dict[str, Any]:
    agents = [{**PLANNER, "label": f"planner_{i}"} for i in range(labels)] + [{"name": "always_menu"}]
    return {"name": "plan_wait_test", "base": {"schedule": SCHEDULE},
            "vary": {"design": "grid", "parameters": {"memory.threshold": {"values": thresholds}}},
            "agents": agents, "seeds": {"first": 5, "count": 2}, "outputs": {"plots": False}}


@pytest.mark.parametrize(("thresholds", "labels"), [([-2.6], 2), ([-3.0, -2.2], 2), ([-2.8], 4)])
def test_two_workers_count_plans_and_waits_that_add_up(tmp_path: Path, thresholds: list[float], labels: int) -> None:
    cache.clear_plans()  # the forked workers start with no plan in memory
    report = run_sweep(_spec(thresholds, labels), tmp_path / "s", workers=2, progress=False)
    assert not report.failed
    metas = [json.loads(p.read_text()) for p in (tmp_path / "s" / "runs").glob("*/meta.json")]
    users = json.loads((tmp_path / "s" / "manifest.json").read_text())["runs"]
    point_of = {r["run_id"]: (r["point_index"], r["agent"]) for r in users}
    assert len(metas) == len(thresholds) * (labels + 1)
    for m in metas:
        assert m["plan_s"] >= 0.0 and m["plan_wait_s"] >= 0.0
        assert m["plan_s"] + m["plan_wait_s"] <= m["compute_s"]  # simulation is what is left
        if point_of[m["run_id"]][1] == "always_menu":
            assert (m["plan_s"], m["plan_wait_s"], m["plans_made"], m["plans_loaded"]) == (0.0, 0.0, 0, 0)
        if m["plan_wait_s"] > 0.0:
            assert m["plans_made"] + m["plans_loaded"] == 1  # only a run that went to the store waits
    for point in range(len(thresholds)):
        mine = [m for m in metas if point_of[m["run_id"]][0] == point and point_of[m["run_id"]][1] != "always_menu"]
        # each world is made once in all, and read once by every other process that ran it
        assert sum(m["plans_made"] for m in mine) == 1
        assert sum(m["plans_made"] + m["plans_loaded"] for m in mine) == len({m["pid"] for m in mine})
    assert report.plans_made == len(thresholds)
    assert report.plan_s == pytest.approx(sum(m["plan_s"] for m in metas))
    assert report.plan_wait_s == pytest.approx(sum(m["plan_wait_s"] for m in metas))
    assert report.compute_s == pytest.approx(sum(m["compute_s"] for m in metas))
    assert any("waiting for another worker's plan" in line for line in report.lines())
