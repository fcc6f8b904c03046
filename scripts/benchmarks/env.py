"""Step cost of CommandSelection-v0 versus CartPole-v1, both through ``gymnasium.make``, same run.

Prints microseconds per step (median of repeats) at horizons of 100, 1,000 and 10,000 trials with
the O(1) ACT-R memory form, and the ratio to CartPole-v1. Target: ratio <= 2. ``quick`` times
horizons of 100 and 1,000 with 3 repeats.
"""

from __future__ import annotations

import gymnasium as gym
import numpy as np

import shortcut_gym.envs  # noqa: F401 - registers CommandSelection-v0
from benchmarks.timing import Out, median_seconds


def us_per_step(env: gym.Env, steps: int, repeats: int = 5, seed: int = 0) -> float:
    """Median microseconds per ``env.step`` over ``repeats`` blocks of ``steps`` random actions.

    Block ``r`` starts from ``env.reset(seed=seed + r)``; the reset and the action draw are untimed.
    """
    rng = np.random.default_rng(seed)
    block = {"r": 0, "actions": []}

    def setup() -> None:
        env.reset(seed=seed + block["r"])
        block["r"] += 1
        block["actions"] = rng.integers(0, env.action_space.n, size=steps).tolist()

    def run() -> None:
        for a in block["actions"]:
            _, _, terminated, truncated, _ = env.step(a)
            if terminated or truncated:
                env.reset()

    return median_seconds(run, repeats, setup=setup) / steps * 1e6


def run(quick: bool = False, out: Out = print) -> None:
    """Print the step-cost table (``quick``: horizons 100 and 1,000, 3 repeats)."""
    horizons = (100, 1_000) if quick else (100, 1_000, 10_000)
    repeats = 3 if quick else 5
    cart = gym.make("CartPole-v1")
    us_per_step(cart, 2000, repeats)  # warm-up
    out(f"{'environment':<44} {'horizon':>8} {'us/step':>9} {'ratio':>7}")
    for horizon in horizons:
        sessions = max(horizon // 100, 1)
        env = gym.make("shortcut_gym/CommandSelection-v0",
                       schedule={"sessions": sessions, "trials_per_session": horizon // sessions},
                       memory={"kind": "actr"})
        us_per_step(env, 200, repeats)  # warm-up, compiles the kernel on first use
        ours = us_per_step(env, horizon, repeats)
        ref = us_per_step(cart, horizon, repeats)
        out(f"{'CartPole-v1 (gymnasium.make)':<44} {horizon:>8} {ref:>9.2f} {1.0:>7.2f}")
        out(f"{'shortcut_gym/CommandSelection-v0 (actr O(1))':<44} {horizon:>8} {ours:>9.2f} {ours / ref:>7.2f}")
    longest = horizons[-1]
    exact = gym.make("shortcut_gym/CommandSelection-v0",
                     schedule={"sessions": longest // 100, "trials_per_session": 100},
                     memory={"kind": "actr_exact"})
    us_per_step(exact, 200, repeats)
    out(f"{'  for contrast, exact ACT-R sum (O(n))':<44} {longest:>8} {us_per_step(exact, longest, 3):>9.2f}")
