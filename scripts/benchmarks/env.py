"""Step cost of CommandSelection-v0 versus CartPole-v1, both through ``gymnasium.make``, same run.

At horizons of 100, 1,000 and 10,000 trials (O(1) ACT-R memory form) the two envs are timed in
interleaved pairs of blocks (ours, CartPole, ours, CartPole, ...), each block at least 20,000
random-action steps (episodes that end inside a block reset inside it, for both envs alike), so a
burst of load on a shared machine hits both halves of a pair. Each pair gives a ratio; the table
prints the median ratio and the spread (min and max of the paired ratios), with the load average
before and after. Target: median ratio <= 2. ``quick`` is a smoke run (2,000-step blocks, 3 pairs,
horizons 100 and 1,000), too short for a stable figure.
"""

from __future__ import annotations

import gc
import statistics
import time

import gymnasium as gym
import numpy as np

import shortcut_gym.envs  # noqa: F401 - registers CommandSelection-v0
from benchmarks.timing import Out, load_average

#: Steps per timed block at full size: below about this, blocks of a few ms let one scheduler
#: hiccup on a shared 2-core machine swing a ratio by a third.
FULL_BLOCK_STEPS = 20_000


def block_seconds(env: gym.Env, steps: int, seed: int) -> float:
    """Seconds of ``steps`` ``env.step`` calls of random actions from ``env.reset(seed=seed)``.

    The first reset and the action draw are untimed; resets at episode ends are timed. The
    cyclic garbage collector is off while timing (as ``timeit`` does), after an untimed collection,
    so a collection triggered by one env's garbage does not land in the other's block.
    """
    actions = np.random.default_rng(seed).integers(0, env.action_space.n, size=steps).tolist()
    env.reset(seed=seed)
    gc.collect()
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        t0 = time.perf_counter()
        for a in actions:
            _, _, terminated, truncated, _ = env.step(a)
            if terminated or truncated:
                env.reset()
        return time.perf_counter() - t0
    finally:
        if was_enabled:
            gc.enable()


def paired_us_per_step(ours: gym.Env, ref: gym.Env, steps: int, pairs: int) -> tuple[list[float], list[float]]:
    """Microseconds per step of ``ours`` and ``ref`` in ``pairs`` interleaved blocks of ``steps``
    (ours then ref, same seed within a pair)."""
    if pairs < 1 or steps < 1:
        raise ValueError(f"pairs and steps must be >= 1, got pairs={pairs}, steps={steps}")
    mine, theirs = [], []
    for r in range(pairs):
        mine.append(block_seconds(ours, steps, seed=r) / steps * 1e6)
        theirs.append(block_seconds(ref, steps, seed=r) / steps * 1e6)
    return mine, theirs


def summary(mine: list[float], theirs: list[float]) -> tuple[float, float, float, float, float]:
    """(median us/step ours, median us/step ref, median, min and max of the paired ratios)."""
    ratios = [m / t for m, t in zip(mine, theirs, strict=True)]
    return (float(statistics.median(mine)), float(statistics.median(theirs)),
            float(statistics.median(ratios)), min(ratios), max(ratios))


def actr_env(horizon: int, kind: str = "actr") -> gym.Env:
    """CommandSelection-v0 with ``horizon`` trials in sessions of 100 (one session below 100)."""
    sessions = max(horizon // 100, 1)
    return gym.make("shortcut_gym/CommandSelection-v0",
                    schedule={"sessions": sessions, "trials_per_session": horizon // sessions},
                    memory={"kind": kind})


def run(quick: bool = False, out: Out = print) -> None:
    """Print the step-cost table (``quick``: a smoke run, see the module docstring)."""
    horizons = (100, 1_000) if quick else (100, 1_000, 10_000)
    steps = 2_000 if quick else FULL_BLOCK_STEPS
    pairs = 3 if quick else 9
    out(f"load average (1, 5, 15 min) before: {load_average()}")
    out(f"{pairs} interleaved pairs of {steps:,}-step blocks per horizon; ratio = ours / CartPole-v1 per pair")
    cart = gym.make("CartPole-v1")
    block_seconds(cart, 2_000, seed=0)  # warm-up
    out(f"{'environment':<44} {'horizon':>8} {'us/step':>9} {'ratio':>7} {'min':>6} {'max':>6}")
    for horizon in horizons:
        env = actr_env(horizon)
        block_seconds(env, 2_000, seed=0)  # warm-up, compiles the kernel on first use
        ours, ref, ratio, low, high = summary(*paired_us_per_step(env, cart, steps, pairs))
        out(f"{'CartPole-v1 (gymnasium.make)':<44} {horizon:>8} {ref:>9.2f} {1.0:>7.2f} {1.0:>6.2f} {1.0:>6.2f}")
        out(f"{'shortcut_gym/CommandSelection-v0 (actr O(1))':<44} {horizon:>8} {ours:>9.2f} {ratio:>7.2f} "
            f"{low:>6.2f} {high:>6.2f}")
    exact = actr_env(horizons[-1], kind="actr_exact")
    block_seconds(exact, 2_000, seed=0)
    ours, _, ratio, low, high = summary(*paired_us_per_step(exact, cart, steps, 3))
    out(f"{'  for contrast, exact ACT-R sum (O(n))':<44} {horizons[-1]:>8} {ours:>9.2f} {ratio:>7.2f} "
        f"{low:>6.2f} {high:>6.2f}")
    out(f"load average (1, 5, 15 min) after: {load_average()}")
