"""Simulate agents on a world for many seeded users and summarise the trial tables."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import pandas as pd

from shortcut_gym.agents.base import Agent
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.agents.rollout import labelled_trial_table
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.world import World


def parse_agent_arg(text: str) -> dict[str, Any]:
    """'name' or 'name:p=v,q=w' -> agent spec dict; bad syntax raises ValueError naming it."""
    name, _, rest = text.partition(":")
    if not name:
        raise ValueError(f"agent {text!r}: missing agent name before ':'")
    params: dict[str, Any] = {}
    for item in filter(None, rest.split(",")):
        key, eq, value = item.partition("=")
        if not eq or not key:
            raise ValueError(f"agent {text!r}: parameter {item!r} must look like name=value")
        try:
            params[key] = float(value)
        except ValueError:
            raise ValueError(f"agent {text!r}: parameter {key} value {value!r} is not a number") from None
    return {"name": name, "params": params}


def label_of(spec: dict[str, Any]) -> str:
    """Short label of an agent spec, e.g. 'learn_first_k(k=2)'."""
    params = spec.get("params") or {}
    if not params:
        return spec["name"]
    inner = ",".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in params.items())
    return f"{spec['name']}({inner})"


def simulate_agents(world: World, specs: Sequence[dict[str, Any] | Agent], seeds: Sequence[int]) -> pd.DataFrame:
    """Trial table of every agent x seed (one simulated user per seed, same seeds per agent).

    A spec dict is labelled by the parameters it sets (``rescorla_wagner(alpha=0.5)``); an agent
    object by its full spec.
    """
    labelled = [(label_of(s.spec()), s) if isinstance(s, Agent) else (label_of(s), agent_from_spec(s)) for s in specs]
    return labelled_trial_table(CommandSelectionEnv(world=world), labelled, seeds)


def session_summary(trials: pd.DataFrame) -> pd.DataFrame:
    """Per agent x session: mean total time per user (s) and share of trials issued by hotkey."""
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
    out["session"] = out["session"] + 1
    return out
