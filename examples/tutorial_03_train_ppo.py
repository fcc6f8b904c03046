"""Tutorial step 3: train Stable-Baselines3 PPO on the environment, save, reload, evaluate.

Run: .venv/bin/python examples/tutorial_03_train_ppo.py
(40,000 steps take well under a minute on 2 CPU cores.)
"""

from __future__ import annotations

import tempfile
from pathlib import Path

from shortcut_gym.agents import agent_from_spec, make_agent, run_episode
from shortcut_gym.envs import CommandSelectionEnv, make_world


def main(total_timesteps: int = 40_000) -> dict[str, float]:
    world = make_world(schedule={"sessions": 2, "trials_per_session": 40})
    env = CommandSelectionEnv(world=world)

    ppo = make_agent("ppo", deterministic=True)
    ppo.train(world, total_timesteps=total_timesteps, seed=0, progress_bar=False)

    with tempfile.TemporaryDirectory() as tmp:
        path = ppo.save(Path(tmp) / "ppo_tidepool")
        reloaded = agent_from_spec({"name": "ppo", "model_path": str(path), "deterministic": True})
        seeds = range(100, 110)
        ppo_s = float(reloaded.evaluate(env, seeds)["total_time_s"].mean())
    menu = make_agent("always_menu")
    menu_s = sum(float(run_episode(env, menu, seed=s)["duration_s"].sum()) for s in seeds) / len(seeds)
    print(f"PPO after {total_timesteps} steps: {ppo_s:.1f} s per user; always menu: {menu_s:.1f} s")
    return {"ppo_s": ppo_s, "menu_s": menu_s}


if __name__ == "__main__":
    main()
