"""What the benchmark suites share: the median wall time of repeated calls, the looped
gymnasium env + agent reference, and the load average printed beside the figures.

Benchmarks print figures as ratios against a reference timed the same way in the same run, so
the machine's speed cancels out; nothing here asserts a time.
"""

from __future__ import annotations

import os
import statistics
import time
from collections.abc import Callable
from typing import Any

import gymnasium as gym

from shortcut_gym.agents.base import Transition
from shortcut_gym.agents.rollout import context_of

#: Where a suite's lines go: ``print`` by default, any callable taking one string otherwise.
Out = Callable[[str], Any]


def median_seconds(fn: Callable[[], Any], repeats: int, warm_up: bool = False,
                   setup: Callable[[], Any] | None = None) -> float:
    """Median seconds of ``repeats`` timed calls of ``fn``.

    ``warm_up`` makes one untimed call first (numba compiles, caches fill). ``setup``, if given,
    runs untimed before every call of ``fn``, warm-up included (e.g. resetting an env).
    """
    if repeats < 1:
        raise ValueError(f"repeats must be >= 1, got {repeats}")
    if warm_up:
        if setup is not None:
            setup()
        fn()
    times = []
    for _ in range(repeats):
        if setup is not None:
            setup()
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(statistics.median(times))


def looped_trials_per_s(env: gym.Env, agent: Any, users: int) -> float:
    """Trials per second of ``env`` + ``agent`` stepped one trial at a time (act, step, observe;
    no trial table kept) over episodes of seeds 0 .. ``users`` - 1, after one untimed warm-up
    episode of seed 1 (compiles, plans)."""
    agent.bind(context_of(env))
    n, t0 = 0, 0.0
    for seed in range(-1, users):  # seed -1: warm-up (reset with seed 1), not timed
        if seed == 0:
            t0 = time.perf_counter()
        obs, info = env.reset(seed=abs(seed))
        agent.reset(abs(seed))
        done = False
        while not done:
            a = agent.act(obs, info)
            nxt, r, term, trunc, info = env.step(a)
            agent.observe(Transition(obs, a, r, nxt, info, term, trunc))
            obs, done = nxt, term or trunc
            n += seed >= 0
    return n / (time.perf_counter() - t0)


def load_average() -> str:
    """The 1, 5 and 15 minute load averages, as printed beside the figures."""
    return ", ".join(f"{x:.2f}" for x in os.getloadavg())
