"""Every agent with more than one path agrees with itself on a multi-session log.

Paths: acting in the env (``action_probabilities`` before each trial, ``observe`` after), replaying
the resulting trial log (the lab's slow likelihood), the agent's vectorised likelihood and its
batch policy on the batched simulator. The first trial of each session is where an agent reading
the finished trial's ``session`` instead of the upcoming ``next_session`` goes wrong.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents.base import Agent, BatchAgent, LikelihoodAgent
from shortcut_gym.agents.learning import MECHANISMS, TrialArrays
from shortcut_gym.agents.registry import AGENTS, make_agent
from shortcut_gym.agents.rollout import context_of, drive_batch, run_episode
from shortcut_gym.envs import BatchSimulator, CommandSelectionEnv
from shortcut_gym.envs.kernel import ACTION_NAMES
from shortcut_gym.lab.fitting import replay_probabilities

SCHEDULE = {"sessions": 3, "trials_per_session": 12, "gap_h": 20.0}
SEEDS = [0, 1, 2]
#: A static softmax whose session covariate matters (logit units; values of this test, no source).
SESSION_SOFTMAX = {"covariates": ("log_exposure", "session"), "b_hotkey": -1.0, "b_learn": -2.0,
                   "w_hotkey_log_exposure": 0.8, "w_learn_log_exposure": -0.5, "w_hotkey_session": 0.9,
                   "w_learn_session": -0.6}


def _env() -> CommandSelectionEnv:
    return CommandSelectionEnv(schedule=SCHEDULE)


def _has_several_paths(agent: Agent) -> bool:
    return isinstance(agent, (LikelihoodAgent, BatchAgent))


def _cases() -> list[tuple[str, dict[str, Any]]]:
    ctx = context_of(_env())
    # the planner acts through decide() without asking action_probabilities, which this test
    # records; its batch path is checked against the looped env in tests/test_batch_frozen.py
    needs_options = {"composed_learner"}  # no default mechanism list: a case below
    # untrained SB3 agents cannot act; their batch path is checked against the per-user path
    # on trained models in tests/test_batch_sb3.py
    needs_model = {"ppo", "a2c", "dqn"}
    cases = [(name, {}) for name in sorted(AGENTS)
             if name not in ("bounded_optimal", *needs_options, *needs_model)
             and _has_several_paths(make_agent(name, ctx))]
    cases.append(("static_softmax", SESSION_SOFTMAX))
    cases.append(("composed_learner", {"mechanisms": list(MECHANISMS)}))
    return cases


CASES = _cases()


def test_the_cases_cover_the_agents_with_several_paths() -> None:
    names = {name for name, _ in CASES}
    assert {"static_softmax", "rescorla_wagner", "choice_kernel", "rw_choice_kernel", "composed_learner", "always_menu",
            "always_hotkey", "learn_first_k", "random", "q_learning", "sarsa"} <= names


def _acting(name: str, options: dict[str, Any], seed: int) -> tuple[pd.DataFrame, np.ndarray]:
    """The trial log of one env episode and the probabilities the agent gave before each trial."""
    env = _env()
    agent = make_agent(name, context_of(env), **options)
    seen: list[np.ndarray] = []
    ask = agent.action_probabilities

    def recorded(obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        p = ask(obs, info)
        seen.append(np.array(p, dtype=float))
        return p

    agent.action_probabilities = recorded  # type: ignore[method-assign]
    trials = run_episode(env, agent, seed=seed)
    return trials, np.stack(seen)


@pytest.mark.parametrize(("name", "options"), CASES, ids=[f"{n}{'-options' if o else ''}" for n, o in CASES])
def test_acting_replay_vectorised_and_batch_paths_agree(name: str, options: dict[str, Any]) -> None:
    env = _env()
    ctx = context_of(env)
    for seed in SEEDS:
        trials, acting = _acting(name, options, seed)
        assert trials["session"].nunique() == SCHEDULE["sessions"]
        codes = trials["action"].map({n: i for i, n in enumerate(ACTION_NAMES)}).to_numpy()
        rows = np.arange(len(trials))
        acting_ll = float(np.log(acting[rows, codes]).sum())
        replayed = replay_probabilities(make_agent(name, ctx, **options), trials, ctx)
        np.testing.assert_allclose(replayed, acting, rtol=1e-12, atol=0.0)
        agent = make_agent(name, ctx, **options)
        if isinstance(agent, LikelihoodAgent):
            data = trials if agent.likelihood_input == "frame" else TrialArrays.from_frame(trials, ctx.n_commands)
            theta = np.array([agent.params[p] for p in agent.param_specs()])
            assert agent.likelihood_function(data)(theta) == pytest.approx(acting_ll, rel=1e-12, abs=1e-12)
        if isinstance(agent, BatchAgent):
            sim = BatchSimulator(env.world)
            sim.reset(seeds=[seed])
            kept = drive_batch(sim, agent, [seed], fused=False, keep_trials=True).trials
            assert kept is not None
            np.testing.assert_array_equal(kept.action[0], codes)


def test_session_covariate_uses_the_upcoming_trials_session() -> None:
    """Against the closed form: P(a) = softmax(b_a + w_a,exp ln(1 + earlier uses) + w_a,session * session)."""
    trials, acting = _acting("static_softmax", SESSION_SOFTMAX, seed=5)
    uses: dict[int, int] = {}
    opts = SESSION_SOFTMAX
    for t, row in enumerate(trials.itertuples()):
        x = math.log1p(uses.get(row.command, 0))
        u = np.array([0.0,
                      opts["b_hotkey"] + opts["w_hotkey_log_exposure"] * x + opts["w_hotkey_session"] * row.session,
                      opts["b_learn"] + opts["w_learn_log_exposure"] * x + opts["w_learn_session"] * row.session])
        expect = np.exp(u - u.max()) / np.exp(u - u.max()).sum()
        np.testing.assert_allclose(acting[t], expect, rtol=1e-12)
        uses[row.command] = uses.get(row.command, 0) + 1


def test_session_covariate_without_next_session_is_an_error() -> None:
    agent = make_agent("static_softmax", context_of(_env()), **SESSION_SOFTMAX)
    agent.reset(0)
    with pytest.raises(ValueError, match="next_session"):
        agent.action_probabilities(np.zeros(3), {"target": 0, "session": 1})
