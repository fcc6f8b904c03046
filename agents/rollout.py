"""Run an agent through an environment episode and collect a tidy trial table."""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import gymnasium as gym
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext, Transition
from shortcut_gym.envs.wrappers import TRIAL_COLUMNS, trial_row


def context_of(env: gym.Env) -> AgentContext:
    """World facts of a (possibly wrapped) CommandSelection env for binding an agent."""
    world = env.unwrapped.world  # type: ignore[attr-defined]
    return AgentContext(world.commands.n_commands, world.horizon, world.commands.names,
                        tuple(world.observation_names()), world)


def run_episode(env: gym.Env, agent: Agent, seed: int | None = None, max_trials: int | None = None) -> pd.DataFrame:
    """One simulated user: reset env and agent with ``seed``, step until truncation.

    Returns one row per trial: trial, session, onset_s, command, command_name, action (name),
    outcome, duration_s, p_recall and the time breakdown ``t_<operator>`` columns.
    """
    if agent.context is None:
        agent.bind(context_of(env))
    obs, info = env.reset(seed=seed)
    agent.reset(seed)
    rows = []
    done = False
    while not done:
        action = agent.act(obs, info)
        next_obs, reward, terminated, truncated, step_info = env.step(action)
        agent.observe(Transition(obs, action, reward, next_obs, step_info, terminated, truncated))
        rows.append(trial_row(step_info))
        obs, info = next_obs, step_info
        done = terminated or truncated or (max_trials is not None and len(rows) >= max_trials)
    return pd.DataFrame(rows, columns=list(TRIAL_COLUMNS))


def evaluate_agent(env: gym.Env, agent: Agent, seeds: Iterable[int]) -> pd.DataFrame:
    """Total time (s) and hotkey share per simulated user, one row per seed."""
    rows = []
    for s in seeds:
        df = run_episode(env, agent, seed=int(s))
        rows.append({"seed": int(s), "total_time_s": df["duration_s"].sum(),
                     "hotkey_share": float((df["outcome"] == "hotkey").mean())})
    return pd.DataFrame(rows)


def labelled_trial_table(env: gym.Env, agents: Iterable[tuple[str, Agent]], seeds: Sequence[int]) -> pd.DataFrame:
    """Trial table of every (label, agent) x seed: columns agent, user, then run_episode's."""
    frames = []
    for label, agent in agents:
        for s in seeds:
            df = run_episode(env, agent, seed=int(s))
            df.insert(0, "user", int(s))
            df.insert(0, "agent", label)
            frames.append(df)
    return pd.concat(frames, ignore_index=True)
