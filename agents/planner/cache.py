"""Plans computed once per world and planning options, in this process, and shared by every user.

A plan depends on the world and the planning options only, so every planner agent of one world
(every simulated user, chunk of users, thread and sweep run in the process) reads the same plan
(:class:`~shortcut_gym.agents.planner.search.Plan` is read-only once solved). The key is the
world's content digest (:meth:`~shortcut_gym.envs.world.World.digest`) with the options. Planning
happens under a lock, so threads asking for the same world wait for one plan instead of each
making their own. The seconds spent planning are counted (:func:`planning_seconds`), so drivers
report them apart from simulation time.
"""

from __future__ import annotations

import threading
import time
from collections import OrderedDict

from shortcut_gym.agents.planner.search import SELECTION_USERS, Plan, plan_world
from shortcut_gym.envs.world import World

#: Plans kept (least recently used dropped first); a plan of the demo world is a few MB.
MAX_PLANS = 64

_plans: OrderedDict[tuple, Plan] = OrderedDict()
_lock = threading.Lock()
_spent: dict[str, float] = {"seconds": 0.0, "plans": 0}


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
    """:func:`cached_plan` and the seconds this call spent planning (0.0 when the plan was cached)."""
    key = plan_key(world, max_uses, n_bins, keyboard_share, n_weight_bins, select_users)
    with _lock:
        plan = _plans.get(key)
        if plan is not None:
            _plans.move_to_end(key)
            return plan, 0.0
        start = time.perf_counter()
        plan = plan_world(world, max_uses, n_bins, keyboard_share, n_weight_bins=n_weight_bins,
                          select_users=select_users)
        spent = time.perf_counter() - start
        _spent["seconds"] += spent
        _spent["plans"] += 1
        _plans[key] = plan
        while len(_plans) > MAX_PLANS:
            _plans.popitem(last=False)
        return plan, spent


def planning_seconds() -> float:
    """Seconds this process has spent making plans for :func:`cached_plan` (cache hits cost none)."""
    return _spent["seconds"]


def plans_made() -> int:
    """Plans this process has made for :func:`cached_plan`."""
    return int(_spent["plans"])


def clear_plans() -> None:
    """Forget every cached plan (the counters keep counting)."""
    with _lock:
        _plans.clear()
