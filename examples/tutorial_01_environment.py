"""Tutorial step 1: make the environment, read one trial's time breakdown, compare two habits.

Run: .venv/bin/python examples/tutorial_01_environment.py
"""

from __future__ import annotations

import gymnasium as gym


def main() -> dict[str, float]:
    # 1. The "shortcut_gym:" prefix imports the package, which registers the environment.
    env = gym.make("shortcut_gym:shortcut_gym/CommandSelection-v0", schedule={"sessions": 3, "trials_per_session": 40})
    obs, info = env.reset(seed=7)
    print(f"first target: {info['target_name']}; observation has {obs.shape[0]} entries")

    # 2. One menu trial, with its time split by operator (seconds).
    obs, reward, terminated, truncated, info = env.step(0)
    parts = ", ".join(f"{k}={v:.2f}" for k, v in info["time_s"].items() if v > 0)
    print(f"menu trial: {info['duration_s']:.2f} s ({parts})")

    # 3. Two habits on the same simulated user (same seed => same trials): always the menu, and
    #    learn each hotkey on first sight, then always use it.
    totals: dict[str, float] = {}
    for habit in ("always menu", "learn once, then hotkey"):
        obs, info = env.reset(seed=7)
        seen: set[int] = set()
        total, done = 0.0, False
        while not done:
            target = info["target"]
            if habit == "always menu":
                action = 0
            else:
                action = 1 if target in seen else 2
                seen.add(target)
            obs, reward, terminated, truncated, info = env.step(action)
            total -= reward
            done = terminated or truncated
        totals[habit] = total
        print(f"{habit:>24}: {total:8.1f} s over {env.unwrapped.world.horizon} trials")
    return totals


if __name__ == "__main__":
    main()
