"""Simulate agents on a world for many seeded users and summarise the trial tables."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import pandas as pd

from shortcut_gym.agents.base import Agent
from shortcut_gym.agents.registry import agent_from_spec, refuse_planner_memory
from shortcut_gym.agents.rollout import labelled_trial_table
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.seeds import check_seeds
from shortcut_gym.envs.world import World


def label_of(spec: dict[str, Any]) -> str:
    """The spec's ``label``, else a short one from its parameters, e.g. 'learn_first_k(k=2)',
    'composed_learner[value,lapse](alpha=0.5)'."""
    if spec.get("label"):
        return str(spec["label"])
    params = spec.get("params") or {}
    name = spec["name"]
    if spec.get("mechanisms") is not None:
        name += "[" + ",".join(spec["mechanisms"]) + "]"
    if not params:
        return name
    inner = ",".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in params.items())
    return f"{name}({inner})"


def simulate_agents(world: World, specs: Sequence[dict[str, Any] | Agent], seeds: Sequence[int]) -> pd.DataFrame:
    """Trial table of every agent x seed (one simulated user per seed, same seeds per agent).

    A spec dict is labelled by the parameters it sets (``rescorla_wagner(alpha=0.5)``); an agent
    object by its full spec.
    """
    seeds = check_seeds(seeds, "simulate_agents")
    labelled = [(label_of(s.spec()), s) if isinstance(s, Agent) else (label_of(s), agent_from_spec(s)) for s in specs]
    refuse_planner_memory(world, [(label, a.name) for label, a in labelled if getattr(a, "world", None) is None],
                          "simulate_agents")
    return labelled_trial_table(CommandSelectionEnv(world=world), labelled, seeds)


def session_summary(trials: pd.DataFrame) -> pd.DataFrame:
    """Per agent x session: mean total time per user (s) and share of trials issued by hotkey; the
    agents in the order the trial table first names them (the order given)."""
    t = trials.assign(
        hotkey_success=(trials["outcome"] == "hotkey"),
        learned=(trials["outcome"] == "learned"),
    )
    per_user = t.groupby(["agent", "session", "user"]).agg(
        total_time_s=("duration_s", "sum"),
        hotkey_share=("hotkey_success", "mean"),
        learn_trials=("learned", "sum"),
    )
    out = per_user.groupby(["agent", "session"]).mean().reset_index()
    order = {label: i for i, label in enumerate(pd.unique(trials["agent"]))}  # the agents as given
    out = out.sort_values(["agent", "session"], key=lambda col: col.map(order) if col.name == "agent" else col,
                          kind="stable").reset_index(drop=True)
    out["session"] = out["session"] + 1
    return out
