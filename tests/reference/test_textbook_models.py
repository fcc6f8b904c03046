"""The published learning models' log-likelihoods against the published equations, written here.

Source of the equations: Wilson & Collins (2019), eLife 8:e49547, "Ten simple rules for the
computational modeling of behavioral data", Box 2:
* model 3 (Rescorla-Wagner): Q_{t+1}(k) = Q_t(k) + alpha (r_t - Q_t(k)) for the chosen k,
  p_t(k) = exp(beta Q_t(k)) / sum_i exp(beta Q_t(i));
* model 4 (choice kernel): CK_{t+1}(k) = CK_t(k) + alpha_c (a_t(k) - CK_t(k)) for every k (a_t(k) = 1
  for the chosen option, else 0), p_t(k) = exp(beta_c CK_t(k)) / sum_i exp(beta_c CK_t(i));
* model 5: p_t(k) = exp(beta Q_t(k) + beta_c CK_t(k)) / sum_i exp(beta Q_t(i) + beta_c CK_t(i)).
Applied here per command (one Q table per command), reward r_t = -duration_s; Q starts at
-prior_time_s (4 s, this project's option default), CK at 0 as in the source.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.rollout import context_of, run_episode
from shortcut_gym.envs import CommandSelectionEnv, make_world
from shortcut_gym.lab.fitting import ModelSpec, loglik_function

WORLD = make_world(schedule={"sessions": 3, "trials_per_session": 40, "gap_h": 20.0})
ACTIONS = {"menu": 0, "hotkey": 1, "learn": 2}
Q0 = -4.0  # -prior_time_s default


def published_loglik(trials: pd.DataFrame, n_commands: int, alpha: float = 0.0, beta: float = 0.0,
                     alpha_c: float = 0.0, beta_c: float = 0.0) -> float:
    """Sum of ln p_t(a_t) of Wilson & Collins' model 5; beta_c = 0 gives model 3, beta = 0 model 4."""
    q = [[Q0, Q0, Q0] for _ in range(n_commands)]
    ck = [0.0, 0.0, 0.0]
    total = 0.0
    for row in trials.sort_values("trial").itertuples():
        c, a, r = int(row.command), ACTIONS[row.action], -float(row.duration_s)
        logits = [beta * q[c][k] + beta_c * ck[k] for k in range(3)]
        top = max(logits)
        log_z = top + math.log(sum(math.exp(v - top) for v in logits))
        total += logits[a] - log_z
        q[c][a] = q[c][a] + alpha * (r - q[c][a])
        ck = [ck[k] + alpha_c * ((1.0 if k == a else 0.0) - ck[k]) for k in range(3)]
    return total


CASES = [
    ("rescorla_wagner", {"alpha": 0.35, "beta": 1.2}),
    ("choice_kernel", {"alpha_ck": 0.2, "beta_ck": 3.0}),
    ("rw_choice_kernel", {"alpha": 0.5, "beta": 0.8, "alpha_ck": 0.15, "beta_ck": 2.5}),
]
#: Parameter values to score each log at besides the generating ones (values of this test, no source).
OTHERS = {
    "rescorla_wagner": [{"alpha": 0.05, "beta": 4.0}, {"alpha": 0.9, "beta": 0.1}],
    "choice_kernel": [{"alpha_ck": 0.7, "beta_ck": 0.5}, {"alpha_ck": 0.01, "beta_ck": 12.0}],
    "rw_choice_kernel": [{"alpha": 0.1, "beta": 3.0, "alpha_ck": 0.6, "beta_ck": 0.3}],
}
NAMES = {"alpha": "alpha", "beta": "beta", "alpha_ck": "alpha_c", "beta_ck": "beta_c"}


@pytest.mark.parametrize(("name", "truth"), CASES, ids=[c[0] for c in CASES])
def test_loglik_equals_the_published_equations(name: str, truth: dict[str, float]) -> None:
    env = CommandSelectionEnv(world=WORLD)
    ctx = context_of(env)
    n = WORLD.commands.n_commands
    for seed in (0, 1):
        trials = run_episode(env, make_agent(name, **truth), seed=seed)
        assert trials["action"].nunique() >= 2  # the logs carry choices to score
        f, fast = loglik_function(ModelSpec(name), trials, ctx)
        assert fast
        order = list(make_agent(name).param_specs())
        assert sorted(order) == sorted(truth)  # exactly the published parameters
        for theta in [truth, *OTHERS[name]]:
            expected = published_loglik(trials, n, **{NAMES[k]: v for k, v in theta.items()})
            got = f(np.array([theta[k] for k in order]))
            assert abs(got - expected) < 1e-9, (theta, got, expected)
