"""README's account of the published learning models says what the code does.

The numbers are read from README.md (starting values, bounds), checked against the code's
constants, and then used in a likelihood written here from README's equations alone, which must
equal the package's ln L on simulated logs. The equations are those of Wilson & Collins (2019),
eLife 8:e49547, Box 2, models 3-5; the starting value of Q is this project's assumption.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.learning.mechanisms import OPTION_DEFAULTS
from shortcut_gym.agents.learning.rules import init_state, new_state
from shortcut_gym.agents.rollout import run_episode
from shortcut_gym.envs import CommandSelectionEnv, make_world

README = Path(__file__).resolve().parents[1] / "README.md"
WORLD = make_world(schedule={"sessions": 2, "trials_per_session": 40, "gap_h": 20.0})
ACTIONS = {"menu": 0, "hotkey": 1, "learn": 2}


def _account() -> str:
    """The README paragraph on the published learning models."""
    text = README.read_text()
    start = text.index("**The three published learning models")
    return " ".join(text[start:text.index("Mechanisms of `composed_learner`", start)].split())


def _stated_start() -> tuple[float, float]:
    """(default prior_time_s, CK start) as README states them."""
    words = _account()
    prior = re.search(r"default \*\*([0-9.]+) s\*\*, so Q starts at -([0-9.]+)", words)
    kernel = re.search(r"CK\[a\] starts at \*\*([0-9.]+)\*\*", words)
    assert prior and kernel, "README no longer states the starting values in the expected words"
    assert float(prior.group(1)) == float(prior.group(2))
    return float(prior.group(1)), float(kernel.group(1))


def test_stated_starting_values_are_the_code_constants() -> None:
    prior, kernel = _stated_start()
    assert prior == OPTION_DEFAULTS["prior_time_s"]
    for name in ("rescorla_wagner", "choice_kernel", "rw_choice_kernel"):
        for option in (None, 6.0):
            agent = make_agent(name, options=None if option is None else {"prior_time_s": option})
            st = new_state(1, WORLD.commands.n_commands)
            init_state(agent.rule_set(), st)
            assert np.all(st.values == -(prior if option is None else option))
            assert np.all(st.kernel == kernel)


def test_stated_bounds_are_the_parameter_specs() -> None:
    words = _account()
    m = re.search(r"alpha and alpha_ck in \[(\S+), (\S+)\], beta \(1/s\) and beta_ck \(logit units\) in "
                  r"\[(\S+), (\S+)\]", words)
    assert m, "README no longer states the bounds in the expected words"
    rates, weights = (float(m.group(1)), float(m.group(2))), (float(m.group(3)), float(m.group(4).rstrip(";")))
    specs = make_agent("rw_choice_kernel").param_specs()
    for name, box in (("alpha", rates), ("alpha_ck", rates), ("beta", weights), ("beta_ck", weights)):
        assert (specs[name].lower, specs[name].upper) == box, name
        assert specs[name].transform == "logit"


def readme_loglik(trials: pd.DataFrame, n_commands: int, q0: float, ck0: float, alpha: float = 0.0,
                  beta: float = 0.0, alpha_ck: float = 0.0, beta_ck: float = 0.0) -> float:
    """ln L written from README's bullet points alone."""
    q = np.full((n_commands, 3), q0)
    ck = np.full(3, ck0)
    total = 0.0
    for row in trials.sort_values("trial").itertuples():
        c, a, r = int(row.command), ACTIONS[row.action], -float(row.duration_s)
        logits = beta * q[c] + beta_ck * ck
        total += float(logits[a] - (logits.max() + math.log(np.exp(logits - logits.max()).sum())))
        q[c, a] += alpha * (r - q[c, a])
        ck += alpha_ck * ((np.arange(3) == a) - ck)
    return total


CASES = [
    ("rescorla_wagner", {"alpha": 0.3, "beta": 1.5}),
    ("choice_kernel", {"alpha_ck": 0.25, "beta_ck": 2.0}),
    ("rw_choice_kernel", {"alpha": 0.4, "beta": 0.9, "alpha_ck": 0.2, "beta_ck": 1.5}),
]


@pytest.mark.parametrize(("name", "params"), CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("prior_time_s", [None, 1.5, 6.0])
def test_readme_equations_reproduce_the_likelihood(name: str, params: dict[str, float],
                                                   prior_time_s: float | None) -> None:
    stated_prior, ck0 = _stated_start()
    options = None if prior_time_s is None else {"prior_time_s": prior_time_s}
    q0 = -(stated_prior if prior_time_s is None else prior_time_s)
    env = CommandSelectionEnv(world=WORLD)
    n = WORLD.commands.n_commands
    for seed in (2, 3):
        trials = run_episode(env, make_agent(name, options=options, **params), seed=seed)
        assert trials["action"].nunique() >= 2
        got = make_agent(name, options=options, **params).log_likelihood(trials)
        assert got == pytest.approx(readme_loglik(trials, n, q0, ck0, **params), abs=1e-9)
        if "beta" in params:  # a start of 0 (the trial's first guess) gives another likelihood
            assert abs(got - readme_loglik(trials, n, 0.0, ck0, **params)) > 1e-3
