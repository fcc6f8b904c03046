"""Score agents against the bounded-optimal planner on the same simulated users (same seeds).

Time lost versus bounded-optimal = agent's mean total time per user minus the planner's, over the
same seeds (so both meet the same schedules). Hotkey adoption trial = the 1-based trial of a
user's first successful hotkey (NaN when it never happens), averaged over users who adopt.

Standard errors over the simulated users (NaN with one user): ``total_time_se_s`` = sd of the
per-user totals / sqrt(users); ``time_lost_se_s`` = sd of the per-user paired differences (the
agent's total minus the reference's on the same seed) / sqrt(users), the SE of ``time_lost_s``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent
from shortcut_gym.agents.planner import BoundedOptimalPlanner, check_memory_kind
from shortcut_gym.agents.rollout import labelled_trial_table
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import DataError
from shortcut_gym.envs.world import World


def simulate_trials(world: World, agents: Mapping[str, Agent], seeds: Sequence[int]) -> pd.DataFrame:
    """Trial table of every labelled agent x seed (columns agent, user + run_episode's)."""
    return labelled_trial_table(CommandSelectionEnv(world=world), agents.items(), seeds)


def score_trials(trials: pd.DataFrame, reference: str) -> pd.DataFrame:
    """Per agent: time per trial, total per user, adoption trial, hotkey share, time lost vs ``reference``."""
    if reference not in set(trials["agent"]):
        raise DataError(f"reference agent {reference!r} is not in the trial table ({sorted(set(trials['agent']))})")
    per_user = trials.groupby(["agent", "user"], sort=False).agg(
        total_time_s=("duration_s", "sum"), time_per_trial_s=("duration_s", "mean"),
        hotkey_share=("outcome", lambda o: float((o == "hotkey").mean())),
        learn_trials=("action", lambda a: int((a == "learn").sum())),
    )
    first = trials[trials["outcome"] == "hotkey"].groupby(["agent", "user"], sort=False)["trial"].min() + 1
    per_user["adoption_trial"] = first.reindex(per_user.index).astype(float)
    ref = per_user.loc[reference, "total_time_s"]
    per_user["time_lost_s"] = per_user["total_time_s"] - ref.reindex(per_user.index.get_level_values("user")).values
    out = per_user.groupby(level="agent", sort=False).agg(
        time_per_trial_s=("time_per_trial_s", "mean"), total_time_s=("total_time_s", "mean"),
        total_time_se_s=("total_time_s", _standard_error),
        adoption_trial=("adoption_trial", "mean"), hotkey_share=("hotkey_share", "mean"),
        learn_trials=("learn_trials", "mean"), time_lost_s=("time_lost_s", "mean"),
        time_lost_se_s=("time_lost_s", _standard_error),
    )
    out["users"] = per_user.groupby(level="agent", sort=False).size()
    return out.reset_index()


def _standard_error(values: pd.Series) -> float:
    """sd (ddof 1) / sqrt(n) of the values; NaN for fewer than two."""
    n = len(values)
    return float(np.std(values.to_numpy(float), ddof=1) / np.sqrt(n)) if n > 1 else float("nan")


def time_lost_vs_planner(world: World, agents: Mapping[str, Agent], seeds: Sequence[int],
                         planner_label: str = "bounded_optimal") -> pd.DataFrame:
    """Simulate the agents and the planner on the same seeds and score them against the planner."""
    runs = dict(agents)
    check_memory_kind(world, "time_lost_vs_planner")
    if planner_label not in runs:
        runs[planner_label] = BoundedOptimalPlanner(world=world)
    return score_trials(simulate_trials(world, runs, seeds), planner_label)


__all__ = ["score_trials", "simulate_trials", "time_lost_vs_planner"]
