"""Plans computed once per world and planning options, in this process, and shared by every user.

A plan depends on the world and the planning options only, so every planner agent of one world
(every simulated user, chunk of users, thread and sweep run in the process) reads the same plan
(:class:`~shortcut_gym.agents.planner.search.Plan` is read-only once solved). The key is the
world's plan digest (:meth:`~shortcut_gym.envs.world.World.plan_digest`: the numbers, not the
names or descriptions, so worlds differing only in text share one plan) with the options. Planning
happens under a lock, so threads asking for the same world wait for one plan instead of each
making their own. The seconds spent planning are counted (:func:`planning_seconds`), so drivers
report them apart from simulation time.

With a plan store in use (:mod:`.plan_store`: a folder on disk, set per process or by
``SHORTCUT_GYM_PLAN_STORE``; a sweep sets its own) a plan missing in memory is read from the store
when another process made it, and a plan made here is written there; one process plans a world
at a time (a lock per entry), so every worker of a sweep shares one plan per world. Plans read
from the store are counted apart (:func:`plans_loaded`, :func:`loading_seconds`).

Memory: the plans kept are bounded by count (``MAX_PLANS``) and by bytes (``MAX_PLAN_BYTES`` by
default, :func:`set_max_bytes`; a plan's bytes are those of its numpy arrays, :func:`plan_nbytes`,
measured again at every insertion since an MDP builds its sparse copy when first used). The least
recently used plans are dropped first; the plan just made or read is always kept, even alone over
the bound (its caller holds it anyway), and a dropped plan is made or read again when next wanted.
"""

from __future__ import annotations

import threading
import time
from collections import OrderedDict

import numpy as np

from shortcut_gym.agents.planner import plan_store
from shortcut_gym.agents.planner.search import SELECTION_USERS, Plan, plan_world
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World

#: Most plans kept (least recently used dropped first).
MAX_PLANS = 64
#: Default bound on the bytes of the plans kept per process (256 MB; a plan of the demo world with
#: the default 40 bins holds about 80 MB of arrays). Change it with :func:`set_max_bytes`.
MAX_PLAN_BYTES = 256 * 10**6

_plans: OrderedDict[tuple, Plan] = OrderedDict()
_lock = threading.Lock()
_spent: dict[str, float] = {"seconds": 0.0, "plans": 0, "loaded": 0, "load_seconds": 0.0, "wait_seconds": 0.0}
_bound: dict[str, int] = {"bytes": MAX_PLAN_BYTES}


def set_max_bytes(max_bytes: int) -> int:
    """Bound the bytes of the plans kept in this process (whole number >= 1); returns the previous bound.
    Plans over it are dropped at once (least recently used first)."""
    if isinstance(max_bytes, bool) or not isinstance(max_bytes, int) or max_bytes < 1:
        raise ConfigError(f"the plan cache bound max_bytes must be a whole number of bytes >= 1, got {max_bytes!r}")
    previous = _bound["bytes"]
    _bound["bytes"] = max_bytes
    with _lock:
        _evict()
    return previous


def max_bytes() -> int:
    """The bound on the bytes of the plans kept in this process."""
    return _bound["bytes"]


def plan_nbytes(plan: object) -> int:
    """Bytes of the numpy arrays a plan holds (each array once, followed through its objects'
    attributes, lists, tuples and dicts; views counted by their base): what keeping it costs."""
    seen: set[int] = set()
    total = 0
    stack: list[object] = [plan]
    while stack:
        obj = stack.pop()
        if id(obj) in seen:
            continue
        seen.add(id(obj))
        if isinstance(obj, np.ndarray):
            base = obj
            while isinstance(base.base, np.ndarray):
                base = base.base
            if base is not obj:
                stack.append(base)
            else:
                total += obj.nbytes
        elif isinstance(obj, dict):
            stack.extend(obj.values())
        elif isinstance(obj, (list, tuple)):
            stack.extend(obj)
        elif hasattr(obj, "__dict__") and not isinstance(obj, type):
            stack.extend(vars(obj).values())
    return total


def cached_bytes() -> int:
    """Bytes of the plans kept now (:func:`plan_nbytes` summed)."""
    with _lock:
        return sum(plan_nbytes(p) for p in _plans.values())


def cached_keys() -> list[tuple]:
    """The keys of the plans kept now, least recently used first."""
    with _lock:
        return list(_plans)


def _evict() -> None:
    """Drop least recently used plans until both bounds hold (the newest always stays); under ``_lock``."""
    while len(_plans) > MAX_PLANS:
        _plans.popitem(last=False)
    sizes = {k: plan_nbytes(p) for k, p in _plans.items()}
    total = sum(sizes.values())
    while len(_plans) > 1 and total > _bound["bytes"]:
        key, _ = _plans.popitem(last=False)
        total -= sizes[key]


def plan_key(world: World, max_uses: int, n_bins: int, keyboard_share: float | None, n_weight_bins: int,
             select_users: int) -> tuple:
    """The cache key of a plan: the world's plan digest (:meth:`World.plan_digest`: every number the
    simulator reads, not the text naming things) and the planning options."""
    return (world.plan_digest(), int(max_uses), int(n_bins), keyboard_share, int(n_weight_bins), int(select_users))


def cached_plan(world: World, max_uses: int, n_bins: int = 40, keyboard_share: float | None = None,
                n_weight_bins: int = 10, select_users: int = SELECTION_USERS) -> Plan:
    """:func:`plan_world` of these arguments, computed on the first call for a world and options
    and then returned as the same object."""
    return timed_cached_plan(world, max_uses, n_bins, keyboard_share, n_weight_bins, select_users)[0]


def timed_cached_plan(world: World, max_uses: int, n_bins: int = 40, keyboard_share: float | None = None,
                      n_weight_bins: int = 10, select_users: int = SELECTION_USERS) -> tuple[Plan, float]:
    """:func:`cached_plan` and the seconds this call spent on the plan (planning it, or reading it
    from the plan store; 0.0 when it was in memory), not counting the seconds spent waiting for
    another process holding the plan's store lock (counted apart, :func:`waiting_seconds`)."""
    key = plan_key(world, max_uses, n_bins, keyboard_share, n_weight_bins, select_users)
    with _lock:
        plan = _plans.get(key)
        if plan is not None:
            _plans.move_to_end(key)
            return plan, 0.0
        start = time.perf_counter()
        waited = 0.0
        store = plan_store.plan_store()
        if store is None:
            plan = _make(world, max_uses, n_bins, keyboard_share, n_weight_bins, select_users)
        else:
            with plan_store.key_lock(store, key):
                waited = time.perf_counter() - start  # another process held the entry (making it)
                _spent["wait_seconds"] += waited
                plan = plan_store.load(store, key)
                if plan is not None:
                    _spent["loaded"] += 1
                    _spent["load_seconds"] += time.perf_counter() - start - waited
                else:
                    plan = _make(world, max_uses, n_bins, keyboard_share, n_weight_bins, select_users)
                    path = plan_store.save(store, key, plan)
                    cap = plan_store.store_cap()
                    if cap is not None:
                        plan_store.prune(store, cap, keep=path)
        _plans[key] = plan
        _evict()
        return plan, time.perf_counter() - start - waited


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


def waiting_seconds() -> float:
    """Seconds this process has spent waiting for a plan store entry's lock held by another
    process (which was making or reading that plan); not in :func:`planning_seconds` or
    :func:`loading_seconds`."""
    return _spent["wait_seconds"]


def loading_seconds() -> float:
    """Seconds this process has spent reading plans from the plan store."""
    return _spent["load_seconds"]


def clear_plans() -> None:
    """Forget every cached plan (the counters keep counting)."""
    with _lock:
        _plans.clear()
