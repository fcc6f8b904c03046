"""Demo section: the agent zoo on the demo scenario, scored against the bounded-optimal planner."""

from __future__ import annotations

import time
from pathlib import Path

import pandas as pd

from shortcut_gym.agents.registry import agent_from_spec, make_agent
from shortcut_gym.agents.scoring import score_trials, simulate_trials
from shortcut_gym.envs.config import bundled_config_dir
from shortcut_gym.envs.world import make_world

PPO_STEPS = 40_000


def zoo_section(out: Path, users: int) -> pd.DataFrame:
    """Baselines, learning models (two published, one composed), the planner and a short PPO on Tidepool Logbook.

    Prints time per trial, hotkey adoption trial and time lost versus the planner; writes
    ``zoo_comparison.csv`` in ``out``. Returns the comparison table.
    """
    world = make_world()
    started = time.perf_counter()
    ppo = make_agent("ppo", deterministic=True)
    ppo.train(world, total_timesteps=PPO_STEPS, seed=0, progress_bar=False)
    train_s = time.perf_counter() - started
    agents = {
        "always_menu": make_agent("always_menu"),
        "always_hotkey": make_agent("always_hotkey"),
        "learn_first_k(k=1)": make_agent("learn_first_k", k=1),
        "random": make_agent("random"),
        "rescorla_wagner": make_agent("rescorla_wagner"),
        "rw_choice_kernel": make_agent("rw_choice_kernel"),
        "composed_planner": agent_from_spec(bundled_config_dir() / "agents" / "composed_planner.yaml"),
        f"ppo({PPO_STEPS // 1000}k steps)": ppo,
        "bounded_optimal": make_agent("bounded_optimal", world=world),
    }
    seeds = range(1000, 1000 + users)
    table = score_trials(simulate_trials(world, agents, seeds), "bounded_optimal")
    table.to_csv(out / "zoo_comparison.csv", index=False)
    print(f"\n== Agent zoo on '{world.scenario.name}' ({users} users x {world.horizon} trials; "
          f"PPO trained {PPO_STEPS} steps in {train_s:.0f} s)")
    show = table[["agent", "time_per_trial_s", "adoption_trial", "hotkey_share", "time_lost_s"]]
    print(show.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    print("time_lost_s: mean total time per user minus the planner's on the same users; "
          "adoption_trial: first successful hotkey")
    return table
