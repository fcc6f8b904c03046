"""Learning models: probabilities, equality of the three compiled paths, likelihood, bad input."""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents import make_agent as _make_agent
from shortcut_gym.agents import run_episode
from shortcut_gym.agents.learning import MECHANISMS, TrialArrays, sample_action
from shortcut_gym.agents.rollout import context_of
from shortcut_gym.envs import BatchSimulator, CommandSelectionEnv, make_world

#: The published models and two composed learners (every mechanism; the planner without a choice kernel).
MODELS = ["rescorla_wagner", "choice_kernel", "rw_choice_kernel", "composed_all", "composed_planner"]
COMPOSED = {"composed_all": list(MECHANISMS),
            "composed_planner": ["value", "memory_aware", "planning", "incidental", "forgetting", "perseveration",
                                 "lapse"]}
MYOPIC = [m for m in COMPOSED["composed_planner"] if m != "planning"]


def make_agent(name, context=None, **kwargs):
    """The agents of MODELS by their test names (composed ones as composed_learner with their mechanisms)."""
    if name in COMPOSED:
        return _make_agent("composed_learner", context, mechanisms=COMPOSED[name], **kwargs)
    return _make_agent(name, context, **kwargs)
WORLD = make_world(schedule={"sessions": 3, "trials_per_session": 40})


@pytest.fixture(scope="module")
def env():
    return CommandSelectionEnv(world=WORLD)


def _simulate_with_probs(env, agent, seed):
    """Drive the env like run_episode, recording each trial's probabilities."""
    agent.bind(context_of(env))
    obs, info = env.reset(seed=seed)
    agent.reset(seed)
    from shortcut_gym.agents.base import Transition

    probs, actions = [], []
    done = False
    while not done:
        p = agent.action_probabilities(obs, info)
        a = sample_action(p, float(agent.rng.random()))
        nobs, r, term, trunc, step_info = env.step(a)
        agent.observe(Transition(obs, a, r, nobs, step_info, term, trunc))
        probs.append(p)
        actions.append(a)
        obs, info, done = nobs, step_info, term or trunc
    return np.array(probs), np.array(actions)


@pytest.mark.parametrize("name", MODELS)
def test_probabilities_sum_to_one_and_act_matches(env, name):
    agent = make_agent(name)
    probs, actions = _simulate_with_probs(env, agent, seed=3)
    np.testing.assert_allclose(probs.sum(axis=1), 1.0, atol=1e-12)
    assert (probs >= 0).all()
    # act() samples the same actions as the recorded loop
    df = run_episode(env, make_agent(name), seed=3)
    assert df["action"].tolist() == [("menu", "hotkey", "learn")[a] for a in actions]


@pytest.mark.parametrize("name", MODELS)
def test_single_agent_batch_policy_and_likelihood_agree(env, name):
    seeds = [11, 12, 13]
    agent = make_agent(name)
    agent.bind(context_of(env))
    singles = [_simulate_with_probs(env, make_agent(name), s) for s in seeds]
    tables = [run_episode(env, make_agent(name), seed=s) for s in seeds]
    # batch policy on the batched simulator: same actions, same probabilities
    sim = BatchSimulator(WORLD)
    sim.reset(seeds=seeds)
    policy = agent.batch_policy(len(seeds), seeds)
    for t in range(WORLD.horizon):
        targets = sim.targets().copy()
        acts = policy.actions(targets, sim.obs)
        for b, (p, a) in enumerate(singles):
            assert acts[b] == a[t]
            np.testing.assert_array_equal(policy.probabilities[b], p[t])
        rewards = sim.step(acts)
        policy.observe(targets, acts, sim.outcome, -rewards)
    # compiled likelihood over the logged table = sum of log single-agent probabilities
    for (p, a), df in zip(singles, tables):
        f = agent.likelihood_function(TrialArrays.from_frame(df, WORLD.commands.n_commands))
        theta = np.array([agent.params[n] for n in agent.param_specs()])
        expected = np.log(p[np.arange(len(a)), a]).sum()
        assert f(theta) == pytest.approx(expected, rel=1e-12, abs=1e-9)


DISTANT = {
    "rescorla_wagner": {"alpha": 0.9, "beta": 0.2},
    "choice_kernel": {"alpha_ck": 0.9, "beta_ck": 20.0},
    "rw_choice_kernel": {"alpha": 0.9, "beta": 0.2, "beta_ck": 15.0},
    "composed_planner": {"alpha": 0.9, "beta": 0.2, "recall_rate": 0.05, "horizon_uses": 300.0, "lapse": 0.5},
    "composed_all": {"alpha": 0.9, "beta": 0.2, "beta_ck": 15.0, "stickiness": -4.0, "lapse": 0.5},
}


@pytest.mark.parametrize("name", MODELS)
def test_true_parameters_beat_distant_ones(env, name):
    agent = make_agent(name)
    df = run_episode(env, agent, seed=21)
    f = agent.likelihood_function(TrialArrays.from_frame(df, WORLD.commands.n_commands))
    order = list(agent.param_specs())
    true = np.array([agent.params[n] for n in order])
    far = true.copy()
    for k, v in DISTANT[name].items():
        far[order.index(k)] = v
    assert f(true) > f(far) + 5.0


def test_published_models_have_the_published_parameters():
    """Wilson & Collins (2019), eLife, "Ten simple rules...", models 3, 4, 5: 2, 2 and 4 parameters."""
    assert list(_make_agent("rescorla_wagner").param_specs()) == ["alpha", "beta"]
    assert list(_make_agent("choice_kernel").param_specs()) == ["alpha_ck", "beta_ck"]
    assert list(_make_agent("rw_choice_kernel").param_specs()) == ["alpha", "beta", "alpha_ck", "beta_ck"]
    with pytest.raises(ValueError, match="published model"):
        _make_agent("rescorla_wagner", mechanisms=["value", "lapse"])


def test_composed_learner_has_exactly_the_listed_mechanisms():
    full = make_agent("composed_planner")
    assert {"horizon_uses", "forget_rate_per_h"} <= set(full.param_specs())
    listed = ["value", "memory_aware", "incidental", "perseveration", "lapse"]
    knocked = _make_agent("composed_learner", mechanisms=listed)
    assert list(knocked.mechanisms) == listed
    assert "horizon_uses" not in knocked.param_specs() and "forget_rate_per_h" not in knocked.param_specs()
    rebuilt = _make_agent(knocked.spec()["name"], mechanisms=knocked.spec()["mechanisms"])
    assert list(rebuilt.param_specs()) == list(knocked.param_specs())
    assert list(_make_agent("composed_learner", mechanisms=["value"]).param_specs()) == ["alpha", "beta"]
    with pytest.raises(ValueError, match="list its mechanisms"):
        _make_agent("composed_learner")


def test_myopic_learner_learns_less_than_planning_learner(env):
    def learn_share(agent):
        return np.mean([(run_episode(env, agent, seed=s)["action"] == "learn").mean() for s in range(4)])

    assert learn_share(make_agent("composed_planner")) > 1.5 * learn_share(
        _make_agent("composed_learner", mechanisms=MYOPIC))


@pytest.mark.parametrize("kwargs, message", [
    ({"mechanisms": ["value", "telepathy"]}, "unknown mechanism 'telepathy'"),
    ({"mechanisms": ["value", "value"]}, "listed more than once"),
    ({"mechanisms": ["planning", "value"]}, "'planning' needs 'memory_aware'"),
    ({"mechanisms": ["lapse"]}, "needs 'value' or 'choice_kernel'"),
    ({"mechanisms": ["value"], "lapse": 0.1}, "belongs to mechanism 'lapse'"),
    ({"mechanisms": ["value"], "alpha": 1.5}, "alpha=1.5 is outside [0.0, 1.0]"),
    ({"mechanisms": ["value"], "gamma": 0.3}, "unknown parameter(s) ['gamma']"),
    ({"mechanisms": ["value"], "options": {"prior_time_s": -1.0}}, "prior_time_s=-1.0"),
    ({"mechanisms": "value"}, "list of names"),
])
def test_bad_configuration_errors(kwargs, message):
    with pytest.raises(ValueError) as err:
        _make_agent("composed_learner", **kwargs)
    assert message in str(err.value)


def test_bad_trial_table_errors(env):
    df = run_episode(env, make_agent("always_menu"), seed=0)
    bad = df.copy()
    bad.loc[5, "action"] = "shout"
    with pytest.raises(ValueError, match="row 5: column 'action' value 'shout'"):
        TrialArrays.from_frame(bad)
    with pytest.raises(ValueError, match=r"lacks column\(s\) \['duration_s'\]"):
        TrialArrays.from_frame(df.drop(columns=["duration_s"]))
    agent = make_agent("composed_planner")
    agent.bind(context_of(env))
    f = agent.likelihood_function(TrialArrays.from_frame(df))
    with pytest.raises(ValueError, match="theta must have 8 entries"):
        f(np.zeros(3))


def test_learning_package_modules_import_one_way() -> None:
    """No module of agents/learning imports one that (directly or not) imports it back."""
    import ast
    from pathlib import Path

    folder = Path(__file__).resolve().parents[1] / "agents" / "learning"
    prefix = "shortcut_gym.agents.learning"
    names = {p.stem for p in folder.glob("*.py") if p.stem != "__init__"}
    assert {"mechanisms", "rules", "agent", "batch", "fused", "trials"} <= names
    graph: dict[str, set[str]] = {}
    for name in names:
        deps: set[str] = set()
        for node in ast.walk(ast.parse((folder / f"{name}.py").read_text())):
            if isinstance(node, ast.ImportFrom) and node.module:
                if node.module == prefix:
                    deps |= {a.name for a in node.names if a.name in names}
                elif node.module.startswith(prefix + "."):
                    deps.add(node.module[len(prefix) + 1:].split(".")[0])
            elif isinstance(node, ast.Import):
                deps |= {a.name[len(prefix) + 1:].split(".")[0] for a in node.names if a.name.startswith(prefix + ".")}
        graph[name] = deps & names

    def reaches(start: str, goal: str, seen: set[str]) -> bool:
        for d in graph[start]:
            if d == goal or (d not in seen and reaches(d, goal, seen | {d})):
                return True
        return False

    assert [m for m in sorted(names) if reaches(m, m, set())] == []


def test_forgetting_reads_the_layout_of_the_bound_world() -> None:
    from shortcut_gym.agents.base import AgentContext
    from shortcut_gym.agents.learning import DT_FEATURE, dt_feature_index

    for encoding in ("onehot", "index"):
        for recall in (False, True):
            world = make_world(schedule={"sessions": 1, "trials_per_session": 5}, target_encoding=encoding,
                               observe_recall=recall)
            names = world.observation_names()
            want = names.index(DT_FEATURE)
            n = world.commands.n_commands
            assert dt_feature_index(AgentContext(n, 5, obs_names=tuple(names)), len(names)) == want
            assert dt_feature_index(AgentContext(n, 5, world=world), len(names)) == want
            assert dt_feature_index(AgentContext(n, 5), len(names)) == want
    with pytest.raises(ValueError, match="entries"):
        dt_feature_index(AgentContext(3, 5, obs_names=("a", "b")), 4)
    with pytest.raises(ValueError, match="not among the names"):
        dt_feature_index(AgentContext(3, 5, obs_names=("a", "b")), 2)
    with pytest.raises(ValueError, match="bound context"):
        dt_feature_index(None, 4)
