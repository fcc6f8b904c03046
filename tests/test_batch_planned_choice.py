"""The planned-choice batch policy draws what the single agent draws, trial by trial.

The reference is the agent itself on the gymnasium env (``run_episode``: ``act`` / ``observe`` on
the info dicts, the Python planner's ``action_values`` and ``rng.choice`` of its own generator),
one episode per seed. The compiled run (sums only, and with every trial kept) and the per-trial
batch path must give the same actions, outcomes and durations on every trial, and the compiled
run the same choice probabilities as the single agent, bit for bit. The draws
themselves are checked against the softmax by Monte Carlo: on the first trial, where every user's
values are the fresh planner's, and at beta = 0, where every probability is 1/3.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from scipy import stats

from shortcut_gym.agents import make_agent, run_episode
from shortcut_gym.agents.planned_choice import PlannedChoice, softmax_probabilities
from shortcut_gym.agents.planned_choice_batch import PlannedChoiceBatch, PlannedChoiceSteps
from shortcut_gym.agents.rollout import context_of_world, drive_batch
from shortcut_gym.envs import BatchSimulator, CommandSelectionEnv, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError, UsageError
from shortcut_gym.envs.task import Schedule
from shortcut_gym.lab.sweep.batch import simulate_users

SEEDS = [0, 5, 17, 2024, 99_991]
SHORT = {"sessions": 3, "trials_per_session": 14, "gap_h": [20.0, 0.5]}
CHEAP = {"learn": {"encoding_s": 1.5}}  # learning pays often enough that all three actions occur
#: (world settings, beta, lapse or None): the default world, ACT-R and exponential memory (and the
#: exact ACT-R and power kinds once each), a mid and a near-deterministic inverse temperature
CASES: list[tuple[str, dict[str, Any], float, float | None]] = [
    ("default", {}, 2.0, None),
    ("default", {}, 200.0, 0.1),
    ("actr", {"schedule": SHORT, "costs": CHEAP}, 2.0, 0.2),
    ("actr", {"schedule": SHORT, "costs": CHEAP}, 200.0, None),
    ("actr-aids", {"schedule": SHORT, "costs": CHEAP, "aids": "key_labels"}, 0.7, None),
    ("exponential", {"schedule": SHORT, "costs": CHEAP, "memory": {"kind": "exponential",
                                                                   "exponential_rate_per_s": 1e-4}}, 2.0, None),
    ("exponential", {"schedule": SHORT, "costs": CHEAP, "memory": {"kind": "exponential"}}, 200.0, 0.05),
    ("actr_exact", {"schedule": SHORT, "costs": CHEAP, "memory": {"kind": "actr_exact"}}, 1.0, 0.1),
    ("power", {"schedule": SHORT, "costs": CHEAP, "memory": {"kind": "power", "decay": 0.4,
                                                             "power_time_unit_s": 30.0}}, 200.0, None),
]
IDS = [f"{name}-beta{beta:g}-{'lapse' if lapse else 'nolapse'}" for name, _, beta, lapse in CASES]


class _Recording(PlannedChoice):
    """The agent, keeping the probabilities each ``act`` draws from."""

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        self.seen: list[np.ndarray] = []

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        p = super().action_probabilities(obs, info)
        self.seen.append(p)
        return p


def _params(beta: float, lapse: float | None) -> dict[str, Any]:
    return {"beta": beta} if lapse is None else {"beta": beta, "with_lapse": True, "lapse": lapse}


def _single_env(world: Any, params: dict[str, Any], seeds: list[int]) -> tuple[np.ndarray, ...]:
    """(actions, outcome codes, durations, probabilities) of one episode per seed."""
    agent = _Recording(context_of_world(world), **params)
    env = CommandSelectionEnv(world=world)
    acts, outs, durs, probs = [], [], [], []
    for s in seeds:
        rows = run_episode(env, agent, seed=s)
        acts.append([k.ACTION_NAMES.index(a) for a in rows["action"]])
        outs.append([k.OUTCOME_NAMES.index(o) for o in rows["outcome"]])
        durs.append(rows["duration_s"].to_numpy())
        probs.append(np.array(agent.seen))
    return np.array(acts), np.array(outs), np.array(durs), np.array(probs)


def _sim(world: Any, seeds: list[int]) -> BatchSimulator:
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds)
    return sim


@pytest.mark.parametrize(("name", "settings", "beta", "lapse"), CASES, ids=IDS)
def test_batched_runs_equal_the_single_env_run_trial_for_trial(name, settings, beta, lapse) -> None:
    world = make_world(**settings)
    seeds = SEEDS[:3] if name == "default" else SEEDS
    params = _params(beta, lapse)
    agent = make_agent("planned_choice", context_of_world(world), **params)
    acts, outs, durs, probs = _single_env(world, params, seeds)

    policy = agent.batch_policy(len(seeds), seeds)
    assert isinstance(policy, PlannedChoiceBatch)
    sums, kept = policy.run_recorded(_sim(world, seeds))
    np.testing.assert_array_equal(kept.action, acts)
    np.testing.assert_array_equal(kept.outcome, outs)
    np.testing.assert_array_equal(kept.duration_s, durs)
    # the compiled action values rebuild the Python planner's operation for operation, and both sides
    # take their softmax from the same compiled function: the probabilities are the same doubles
    np.testing.assert_array_equal(policy.recorded_probabilities, probs)

    # drive_batch: the compiled run with sums only, kept trials, and the per-trial Python path
    fused = drive_batch(_sim(world, seeds), agent, seeds).sums
    recorded = drive_batch(_sim(world, seeds), agent, seeds, keep_trials=True)
    stepped = drive_batch(_sim(world, seeds), agent, seeds, fused=False, keep_trials=True)
    assert recorded.trials is not None and stepped.trials is not None
    for field in ("action", "outcome", "duration_s", "p_recall", "operator_s"):
        np.testing.assert_array_equal(getattr(recorded.trials, field), getattr(stepped.trials, field), err_msg=field)
    np.testing.assert_array_equal(stepped.trials.action, acts)
    for field in ("trials", "time_s", "actions", "outcomes", "command_time_s", "command_uses"):
        np.testing.assert_array_equal(getattr(fused, field), getattr(stepped.sums, field), err_msg=field)
        np.testing.assert_array_equal(getattr(sums, field), getattr(stepped.sums, field), err_msg=field)
    if beta < 100 or lapse:  # a sampling case really samples: more than one action is taken
        assert len(np.unique(acts)) > 1


def test_the_family_takes_every_action_somewhere() -> None:
    world = make_world(schedule=SHORT, costs=CHEAP)
    acts = _single_env(world, _params(2.0, 0.2), SEEDS)[0]
    assert set(np.unique(acts)) == {0, 1, 2}


def _first_trial_counts(world: Any, params: dict[str, Any], n_users: int) -> tuple[np.ndarray, np.ndarray]:
    """(commands, 3) counts of the first trial's actions of ``n_users`` compiled users, and the
    commands' fresh-planner values (commands, 3) at trial 0."""
    seeds = list(range(1000, 1000 + n_users))
    sim = _sim(world, seeds)
    agent = make_agent("planned_choice", context_of_world(world), **params)
    _, kept = agent.batch_policy(n_users, seeds).run_recorded(sim)
    n_cmd = world.commands.n_commands
    counts = np.zeros((n_cmd, 3), dtype=np.int64)
    np.add.at(counts, (sim.sched_command[:, 0], kept.action[:, 0]), 1)
    q = np.array([agent.planner().action_values(c, 0) for c in range(n_cmd)])
    return counts, q


def _chi_square_p(counts: np.ndarray, expect_p: np.ndarray) -> float:
    """Pearson's chi-square p-value of per-command multinomial counts (cells of expected count >= 5)."""
    stat, df = 0.0, 0
    for row, p in zip(counts, expect_p, strict=True):
        n = row.sum()
        e = n * p
        use = e >= 5
        if use.sum() < 2:
            continue
        # the cells too rare to test go into one with the largest
        e_used, o_used = e[use].copy(), row[use].astype(float)
        big = int(np.argmax(e_used))
        e_used[big] += e[~use].sum()
        o_used[big] += row[~use].sum()
        stat += float(((o_used - e_used) ** 2 / e_used).sum())
        df += len(e_used) - 1
    assert df > 0
    return float(stats.chi2.sf(stat, df))


@pytest.mark.parametrize(("beta", "lapse"), [(1.0, None), (3.0, 0.3)])
def test_first_trial_actions_follow_the_softmax_of_the_fresh_planners_values(beta, lapse) -> None:
    world = make_world(schedule=SHORT, costs=CHEAP)
    counts, q = _first_trial_counts(world, _params(beta, lapse), 6000)
    lapse_p = lapse or 0.0
    expect = softmax_probabilities(q, beta, lapse_p)  # numpy, from the Python planner's values
    assert _chi_square_p(counts, expect) > 1e-3
    # the test can tell: a softmax at another temperature is rejected on the same draws
    assert _chi_square_p(counts, softmax_probabilities(q, 2.0 * beta, lapse_p)) < 1e-6


def test_at_zero_inverse_temperature_every_action_has_probability_one_third() -> None:
    world = make_world(schedule=SHORT, costs=CHEAP)
    seeds = list(range(400))
    agent = make_agent("planned_choice", context_of_world(world), beta=0.0)
    sums = drive_batch(_sim(world, seeds), agent, seeds).sums
    counts = sums.actions.sum(axis=(0, 1))
    n = counts.sum()
    assert n == 400 * world.horizon
    assert stats.chisquare(counts, np.full(3, n / 3)).pvalue > 1e-3
    # each share within 4 binomial standard errors of 1/3
    se = np.sqrt((1 / 3) * (2 / 3) / n)
    np.testing.assert_array_less(np.abs(counts / n - 1 / 3), 4 * se)


def test_sweeps_simulate_with_the_compiled_policy_and_the_same_numbers() -> None:
    world = make_world(schedule=SHORT, costs=CHEAP)
    spec = {"name": "planned_choice", "with_lapse": True, "params": {"beta": 1.5, "lapse": 0.1}}
    seeds = list(range(7))
    agent = make_agent("planned_choice", context_of_world(world), beta=1.5, with_lapse=True, lapse=0.1)
    assert isinstance(agent.batch_policy(len(seeds), seeds), PlannedChoiceBatch)
    batched = simulate_users(world, spec, seeds)
    per_user = simulate_users(world, spec, seeds, use_batch_policy=False)
    np.testing.assert_array_equal(batched.sums.time_s, per_user.sums.time_s)
    np.testing.assert_array_equal(batched.sums.actions, per_user.sums.actions)


def test_bad_use_is_refused_with_its_reason() -> None:
    world = make_world(schedule=SHORT)
    agent = make_agent("planned_choice", context_of_world(world), beta=1.0)
    with pytest.raises(ConfigError, match="3 seeds for 2 users"):
        agent.batch_policy(2, [1, 2, 3])
    with pytest.raises(ConfigError, match=r"planned_choice.batch_policy: seeds\[0\] = -4 is negative"):
        agent.batch_policy(1, [-4])
    policy = agent.batch_policy(2, [1, 2])
    sim = _sim(world, [1, 2])
    policy.run(sim)
    with pytest.raises(UsageError, match="just reset"):
        policy.run(sim)
    with pytest.raises(UsageError, match="fresh batch policy"):
        policy.run(_sim(world, [1, 2]))
    with pytest.raises(UsageError, match="already ran"):
        policy.actions(np.zeros(2, dtype=np.int64), sim.obs)
    other = agent.batch_policy(3, [1, 2, 3])
    with pytest.raises(ConfigError, match="the policy has 3 users, the simulator 2"):
        other.run(_sim(world, [1, 2]))
    longer = make_world(schedule={"sessions": 4, "trials_per_session": 14, "gap_h": 20.0})
    with pytest.raises(ConfigError, match="planned_choice: the replayed schedule has 56 trials, more than "
                       "the world.s horizon of 42 trials"):
        agent.batch_policy(2, [1, 2]).run(_sim(longer, [1, 2]))
    assert isinstance(other, PlannedChoiceSteps)


@pytest.mark.parametrize("name", ["planned_choice", "bounded_optimal"])
def test_a_schedule_shorter_than_the_plan_runs_the_same_on_every_path(name) -> None:
    # a log cut short (fewer trials than the world's schedule) is simulated on the world's plan:
    # the compiled run, its recorded run and the per-trial Python path give the same trials
    world = make_world(schedule=SHORT)
    seeds = [3, 4, 5]
    full = _sim(world, seeds)
    cut = 17
    schedules = [Schedule(full.sched_command[i, :cut].copy(), full.sched_onset[i, :cut].copy(),
                          full.sched_session[i, :cut].copy(), full.sched_gap[i, :cut].copy())
                 for i in range(len(seeds))]
    params = {"beta": 2.0} if name == "planned_choice" else {}
    agent = make_agent(name, context_of_world(world), **params)

    def short() -> BatchSimulator:
        sim = BatchSimulator(world)
        sim.reset(seeds=seeds, schedules=schedules)
        return sim

    fused = drive_batch(short(), agent, seeds).sums
    recorded = drive_batch(short(), agent, seeds, keep_trials=True)
    stepped = drive_batch(short(), agent, seeds, fused=False, keep_trials=True)
    assert recorded.trials is not None and stepped.trials is not None
    assert recorded.trials.action.shape == (len(seeds), cut)
    for field in ("action", "outcome", "duration_s"):
        np.testing.assert_array_equal(getattr(recorded.trials, field), getattr(stepped.trials, field), err_msg=field)
    for field in ("trials", "time_s", "actions", "command_uses"):
        np.testing.assert_array_equal(getattr(fused, field), getattr(stepped.sums, field), err_msg=field)
