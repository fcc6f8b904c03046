"""Step cost of CommandSelection-v0 versus CartPole-v1, both through gymnasium.make, same run.

Prints microseconds per step (median of repeats) at horizons of 100, 1,000 and 10,000 trials with
the O(1) ACT-R memory form, and the ratio to CartPole-v1. Target: ratio <= 2.
"""

from __future__ import annotations

import statistics
import time

import gymnasium as gym
import numpy as np


def us_per_step(env: gym.Env, steps: int, repeats: int = 5, seed: int = 0) -> float:
    """Median microseconds per env.step over ``repeats`` blocks of ``steps`` random actions."""
    rng = np.random.default_rng(seed)
    times = []
    for r in range(repeats):
        env.reset(seed=seed + r)
        actions = rng.integers(0, env.action_space.n, size=steps).tolist()
        t0 = time.perf_counter()
        for a in actions:
            _, _, terminated, truncated, _ = env.step(a)
            if terminated or truncated:
                env.reset()
        times.append((time.perf_counter() - t0) / steps * 1e6)
    return statistics.median(times)


def main() -> None:
    cart = gym.make("CartPole-v1")
    us_per_step(cart, 2000)  # warm-up
    print(f"{'environment':<44} {'horizon':>8} {'us/step':>9} {'ratio':>7}")
    for horizon in (100, 1_000, 10_000):
        sessions = max(horizon // 100, 1)
        env = gym.make("shortcut_gym/CommandSelection-v0",
                       schedule={"sessions": sessions, "trials_per_session": horizon // sessions},
                       memory={"kind": "actr"})
        us_per_step(env, 200)  # warm-up, compiles the kernel on first use
        ours = us_per_step(env, horizon)
        ref = us_per_step(cart, horizon)
        print(f"{'CartPole-v1 (gymnasium.make)':<44} {horizon:>8} {ref:>9.2f} {1.0:>7.2f}")
        print(f"{'shortcut_gym/CommandSelection-v0 (actr O(1))':<44} {horizon:>8} {ours:>9.2f} {ours / ref:>7.2f}")
    exact = gym.make("shortcut_gym/CommandSelection-v0", schedule={"sessions": 100, "trials_per_session": 100},
                     memory={"kind": "actr_exact"})
    us_per_step(exact, 200)
    print(f"{'  for contrast, exact ACT-R sum (O(n))':<44} {10_000:>8} {us_per_step(exact, 10_000, 3):>9.2f}")


if __name__ == "__main__":
    main()
