"""Log-likelihood of a model on one participant's logged trials.

* Fast path: an agent offering ``likelihood_function(trials)``
  (:class:`~shortcut_gym.agents.base.LikelihoodAgent`) returns a compiled or vectorised
  f(theta) -> log-likelihood over the natural parameter vector.
* Slow path: any agent of the protocol, replayed trial by trial through ``action_probabilities``
  and ``observe`` with the info dicts of :mod:`shortcut_gym.envs.info` (and the observation vector
  rebuilt from the log).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext, LikelihoodAgent, Transition
from shortcut_gym.agents.learning import TrialArrays
from shortcut_gym.envs.info import UpcomingInfo, step_info, upcoming_info
from shortcut_gym.envs.kernel import ACTION_NAMES, since_last_use_feature
from shortcut_gym.envs.observation import ObservationLayout, write_target
from shortcut_gym.lab.fitting.specs import ModelSpec

LogLik = Callable[[np.ndarray], float]


def _observations(trials: pd.DataFrame, n_commands: int) -> np.ndarray:
    """The env's default observation (one-hot target, no recall probability; the layout of
    :class:`~shortcut_gym.envs.observation.ObservationLayout`) before each logged trial."""
    layout = ObservationLayout(n_commands)
    n = len(trials)
    obs = np.zeros((n, layout.dim), dtype=np.float32)
    at = {name: layout.index(name) for name in layout.feature_names()}
    exposures = np.zeros(n_commands)
    ok = np.zeros(n_commands)
    fail = np.zeros(n_commands)
    learned = np.zeros(n_commands)
    last = np.full(n_commands, np.nan)
    hand = 0.0
    cmd = trials["command"].to_numpy()
    onset = trials["onset_s"].to_numpy()
    outcome = trials["outcome"].to_numpy()
    for t in range(n):
        c = int(cmd[t])
        o = obs[t]
        write_target(o, c, n_commands, layout.onehot)
        o[at["log1p_exposures"]] = math.log1p(exposures[c])
        o[at["log1p_seconds_since_last_use"]] = since_last_use_feature(exposures[c], last[c], onset[t])
        o[at["log1p_hotkey_successes"]] = math.log1p(ok[c])
        o[at["log1p_hotkey_failures"]] = math.log1p(fail[c])
        o[at["log1p_learn_count"]] = math.log1p(learned[c])
        o[at["hand_on_keyboard"]] = hand
        o[at["horizon_left_fraction"]] = (n - t) / n
        exposures[c] += 1
        last[c] = onset[t]
        if outcome[t] == "hotkey":
            ok[c] += 1
            hand = 1.0
        else:
            hand = 0.0
            if outcome[t] in ("hotkey_forgotten", "hotkey_wrong"):
                fail[c] += 1
            elif outcome[t] == "learned":
                learned[c] += 1
    return obs


def replay_probabilities(agent: Agent, trials: pd.DataFrame, context: AgentContext, seed: int = 0) -> np.ndarray:
    """Per-trial (menu, hotkey, learn) probabilities of ``agent`` on one participant's logged trials.

    ``trials`` is a ``participant_trials`` frame (command as int index). The agent is bound,
    reset with ``seed``, asked for probabilities before each trial and shown the logged trial after.
    """
    agent.bind(context)
    agent.reset(seed)
    names = context.command_names or tuple(str(i) for i in range(context.n_commands))
    obs = _observations(trials, context.n_commands)
    code = {n: i for i, n in enumerate(ACTION_NAMES)}
    cmd = trials["command"].to_numpy(dtype=np.int64)
    onset = trials["onset_s"].to_numpy(dtype=np.float64)
    session = trials["session"].to_numpy(dtype=np.int64)
    rec = trials.to_dict("records")
    n = len(rec)
    probs = np.empty((n, 3))

    def upcoming(t: int) -> UpcomingInfo:
        """Info before trial t (after the last trial: the last trial's, next_trial = n, as the env)."""
        last = min(t, n - 1)
        return upcoming_info(int(cmd[last]), names[cmd[last]], t, float(onset[last]), int(session[last]))

    info: UpcomingInfo = upcoming(0)
    for t, r in enumerate(rec):
        probs[t] = agent.action_probabilities(obs[t], info)  # type: ignore[arg-type]
        a = code[r["action"]]
        after = step_info(upcoming(t + 1), int(r["trial"]), int(r["session"]), float(r["onset_s"]), int(cmd[t]),
                          names[cmd[t]], a, r["outcome"], float(r["duration_s"]))
        next_obs = obs[min(t + 1, n - 1)]
        agent.observe(Transition(obs[t], a, -float(r["duration_s"]), next_obs, after, t + 1 == n, False))  # type: ignore[arg-type]
        info = after
    return probs


def _likelihood_input(agent: LikelihoodAgent, trials: pd.DataFrame, context: AgentContext) -> Any:
    """What ``agent.likelihood_function`` takes: the frame itself for agents that declare
    ``likelihood_input = "frame"``, else ``TrialArrays.from_frame``."""
    if agent.likelihood_input == "frame":
        return trials
    return TrialArrays.from_frame(trials, context.n_commands)


def loglik_function(spec: ModelSpec, trials: pd.DataFrame, context: AgentContext) -> tuple[LogLik, bool]:
    """(f(theta natural, full vector) -> ln L, whether the fast path is used)."""
    agent = spec.build(context)
    if isinstance(agent, LikelihoodAgent):
        return agent.likelihood_function(_likelihood_input(agent, trials, context)), True
    names = list(agent.param_specs())
    actions = trials["action"].map({n: i for i, n in enumerate(ACTION_NAMES)}).to_numpy(dtype=np.int64)

    def slow(theta: np.ndarray) -> float:
        fresh = spec.build(context, **dict(zip(names, map(float, theta), strict=True)))
        p = replay_probabilities(fresh, trials, context)
        chosen = p[np.arange(len(actions)), actions]
        with np.errstate(divide="ignore"):
            return float(np.log(chosen).sum())

    return slow, False
