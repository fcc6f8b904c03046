"""Plans computed once per world and planning options, in this process, and shared by every user.

A plan depends on the world and the planning options only, so every planner agent of one world
(every simulated user, chunk of users, thread and sweep run in the process) reads the same plan
(:class:`~shortcut_gym.agents.planner.search.Plan` is read-only once solved). The key is the
world's content digest (:meth:`~shortcut_gym.envs.world.World.digest`) with the options. Planning
happens under a lock, so threads asking for the same world wait for one plan instead of each
making their own. The seconds spent planning are counted (:func:`planning_seconds`), so drivers
report them apart from simulation time.

With a plan store in use (:mod:`.plan_store`: a folder on disk, set per process or by
``SHORTCUT_GYM_PLAN_STORE``; a sweep sets its own) a plan missing in memory is read from the store
when another process made it, and a plan made here is written there; one process plans a world
at a time (a lock per entry), so every worker of a sweep shares one plan per world. Plans read
from the store are counted apart (:func:`plans_loaded`, :func:`loading_seconds`).
"""

from __future__ import annotations

import threading
import time
from collections import OrderedDict

from shortcut_gym.agents.planner import plan_store
from shortcut_gym.agents.planner.search import SELECTION_USERS, Plan, plan_world
from shortcut_gym.envs.world import World

#: Plans kept (least recently used dropped first); a plan of the demo world is a few MB.
MAX_PLANS = 64

_plans: OrderedDict[tuple, Plan] = OrderedDict()
_lock = threading.Lock()
_spent: dict[str, float] = {"seconds": 0.0, "plans": 0, "loaded": 0, "load_seconds": 0.0}


def plan_key(world: World, max_uses: int, n_bins: int, keyboard_share: float | None, n_weight_bins: int,
             select_users: int) -> tuple:
    """The cache key of a plan: the world's digest and the planning options."""
    return (world.digest(), int(max_uses), int(n_bins), keyboard_share, int(n_weight_bins), int(select_users))


def cached_plan(world: World, max_uses: int, n_bins: int = 40, keyboard_share: float | None = None,
                n_weight_bins: int = 10, select_users: int = SELECTION_USERS) -> Plan:
    """:func:`plan_world` of these arguments, computed on the first call for a world and options
    and then returned as the same object."""
    return timed_cached_plan(world, max_uses, n_bins, keyboard_share, n_weight_bins, select_users)[0]


def timed_cached_plan(world: World, max_uses: int, n_bins: int = 40, keyboard_share: float | None = None,
                      n_weight_bins: int = 10, select_users: int = SELECTION_USERS) -> tuple[Plan, float]:
    """:func:`cached_plan` and the seconds this call spent on the plan (planning it, or reading it
    from the plan store; 0.0 when it was in memory)."""
    key = plan_key(world, max_uses, n_bins, keyboard_share, n_weight_bins, select_users)
    with _lock:
        plan = _plans.get(key)
        if plan is not None:
            _plans.move_to_end(key)
            return plan, 0.0
        start = time.perf_counter()
        store = plan_store.plan_store()
        if store is None:
            plan = _make(world, max_uses, n_bins, keyboard_share, n_weight_bins, select_users)
        else:
            with plan_store.key_lock(store, key):
                plan = plan_store.load(store, key)
                if plan is not None:
                    _spent["loaded"] += 1
                    _spent["load_seconds"] += time.perf_counter() - start
                else:
                    plan = _make(world, max_uses, n_bins, keyboard_share, n_weight_bins, select_users)
                    path = plan_store.save(store, key, plan)
                    cap = plan_store.store_cap()
                    if cap is not None:
                        plan_store.prune(store, cap, keep=path)
        _plans[key] = plan
        while len(_plans) > MAX_PLANS:
            _plans.popitem(last=False)
        return plan, time.perf_counter() - start


def _make(world: World, max_uses: int, n_bins: int, keyboard_share: float | None, n_weight_bins: int,
          select_users: int) -> Plan:
    """:func:`plan_world`, counted."""
    start = time.perf_counter()
    plan = plan_world(world, max_uses, n_bins, keyboard_share, n_weight_bins=n_weight_bins, select_users=select_users)
    _spent["seconds"] += time.perf_counter() - start
    _spent["plans"] += 1
    return plan


def planning_seconds() -> float:
    """Seconds this process has spent making plans for :func:`cached_plan` (cache hits cost none)."""
    return _spent["seconds"]


def plans_made() -> int:
    """Plans this process has made for :func:`cached_plan`."""
    return int(_spent["plans"])


def plans_loaded() -> int:
    """Plans this process has read from the plan store (made by another process or an earlier run)."""
    return int(_spent["loaded"])


def loading_seconds() -> float:
    """Seconds this process has spent reading plans from the plan store."""
    return _spent["load_seconds"]


def clear_plans() -> None:
    """Forget every cached plan (the counters keep counting)."""
    with _lock:
        _plans.clear()
