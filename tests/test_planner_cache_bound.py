"""The in-process plan cache is bounded by bytes: least recently used plans dropped first, the
newest always kept, each plan's bytes those of the arrays it holds."""

from __future__ import annotations

import pickle
from collections.abc import Iterator

import numpy as np
import pytest

from shortcut_gym.agents.planner import cache
from shortcut_gym.envs import make_world
from shortcut_gym.envs.errors import ConfigError

SCHEDULE = {"sessions": 2, "trials_per_session": 8, "gap_h": 5.0}
THRESHOLDS = [-3.4, -3.0, -2.6, -2.2, -1.8]
MDP_ARRAYS = ("P", "R", "activation", "p_recall", "weight", "activation_grid", "weight_grid")


def _world(threshold: float):  # noqa: ANN202
    return make_world(schedule=SCHEDULE, memory={"threshold": threshold})


def _plan(threshold: float, n_bins: int = 6):  # noqa: ANN202
    world = _world(threshold)
    return cache.cached_plan(world, world.horizon, n_bins, None, 3)


def _key(threshold: float, n_bins: int = 6) -> tuple:
    world = _world(threshold)
    return cache.plan_key(world, world.horizon, n_bins, None, 3, cache.SELECTION_USERS)


@pytest.fixture
def bound() -> Iterator[None]:
    previous = cache.max_bytes()
    cache.clear_plans()
    yield
    cache.set_max_bytes(previous)
    cache.clear_plans()


@pytest.mark.parametrize("n_bins", [4, 6, 9])
def test_a_plans_bytes_lie_between_its_known_arrays_and_its_pickle(bound: None, n_bins: int) -> None:
    plan = _plan(-2.6, n_bins)
    known = sum(getattr(m, name).nbytes for m in plan.mdps for name in MDP_ARRAYS)
    known += sum(a.nbytes for a in plan.values + plan.policy)
    # a pickle holds every array's raw bytes once, plus a little framing
    assert known <= cache.plan_nbytes(plan) <= len(pickle.dumps(plan, protocol=pickle.HIGHEST_PROTOCOL))


def test_views_and_shared_arrays_are_counted_once() -> None:
    base = np.zeros(1000)
    holder = {"a": base, "b": base, "view": base[10:20], "list": [base[::2], np.ones(5)]}
    assert cache.plan_nbytes(holder) == base.nbytes + np.ones(5).nbytes


def _expected_lru(order: list[float], sizes: dict[float, int], limit: int) -> list[float]:
    """The truth: walking back from the most recent use, keep plans while they fit (the newest always)."""
    kept: list[float] = []
    total = 0
    recency = list(dict.fromkeys(reversed(order)))  # most recent first
    for t in recency:
        if kept and total + sizes[t] > limit:
            break
        kept.append(t)
        total += sizes[t]
    return list(reversed(kept))


@pytest.mark.parametrize("room", [0.5, 1.0, 1.5, 2.5, 4.0])
def test_the_cache_stays_under_its_byte_bound_dropping_the_least_recently_used(bound: None, room: float) -> None:
    sizes = {t: cache.plan_nbytes(_plan(t)) for t in THRESHOLDS}
    cache.clear_plans()
    limit = int(room * max(sizes.values()))
    cache.set_max_bytes(limit)
    order = [*THRESHOLDS, THRESHOLDS[1], THRESHOLDS[3], THRESHOLDS[0]]  # re-uses reorder the recency
    for i, t in enumerate(order):
        _plan(t)
        expect = _expected_lru(order[: i + 1], sizes, limit)
        assert cache.cached_keys() == [_key(x) for x in expect], (room, i)
        held = cache.cached_bytes()
        assert held <= limit or len(expect) == 1  # the newest plan alone may exceed a tiny bound
        assert held == sum(sizes[x] for x in expect)


def test_a_dropped_plan_is_made_again_equal_and_a_lower_bound_evicts_at_once(bound: None) -> None:
    first = _plan(-3.0)
    size = cache.plan_nbytes(first)
    _plan(-2.2)
    assert len(cache.cached_keys()) == 2
    cache.set_max_bytes(size)  # room for one: the older goes now
    assert cache.cached_keys() == [_key(-2.2)]
    made = cache.plans_made()
    again = _plan(-3.0)
    assert cache.plans_made() == made + 1 and again is not first
    for a, b in zip(again.policy, first.policy, strict=True):
        np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("bad", [0, -1, 1.5, True, "100"])
def test_a_bad_bound_is_refused_naming_it(bad: object) -> None:
    with pytest.raises(ConfigError, match="plan cache bound max_bytes must be a whole number of bytes >= 1"):
        cache.set_max_bytes(bad)  # type: ignore[arg-type]
