"""A replayed schedule may be shorter than the world's horizon (a log cut short) but not longer.

Every place a schedule is given (env reset options, BatchSimulator.reset, ScheduleReplay) refuses a
longer one with one message naming its length, the horizon and what to do; a planner-based agent
driven past the horizon of its plan refuses with the same words on every path (per trial, the
Python batch, the compiled sums and the compiled kept trials) instead of an IndexError.
"""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest

from shortcut_gym.agents import Transition, make_agent
from shortcut_gym.agents.rollout import context_of_world
from shortcut_gym.envs import ENV_ID, BatchSimulator, Schedule, make_world
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.wrappers import ScheduleReplay

SCHEDULE = {"sessions": 2, "trials_per_session": 6, "gap_h": 30.0}  # a 12-trial world
HORIZON = 12
LONGER = {"sessions": 2, "trials_per_session": 8, "gap_h": 30.0}  # 16 trials, same problem otherwise
PLANNERS = [("bounded_optimal", {"n_bins": 8, "n_weight_bins": 3}),
            ("planned_choice", {"beta": 3.0, "n_bins": 8, "n_weight_bins": 3})]


def _schedule(n: int) -> Schedule:
    """``n`` trials cycling over the first three commands, one a minute, a session break at trial 6."""
    session = (np.arange(n) >= 6).astype(np.int64)
    return Schedule(command=np.arange(n, dtype=np.int64) % 3, onset_s=np.arange(n) * 60.0 + session * 3600.0,
                    session=session, gap_total_s=session * 3600.0)


def _too_long(n: int, where: str, at_least: bool = False) -> str:
    count = f"at least {n}" if at_least else str(n)
    return (rf"{where}: the replayed schedule has {count} trials, more than the world's horizon of {HORIZON} "
            rf"trials; a replay may be shorter than the horizon but not longer: replay only its first {HORIZON} "
            rf"trials, or make the world with a schedule of at least {n} trials")


def _run_env(env: gym.Env, schedule: Schedule | None) -> list[dict]:
    _, info = env.reset(seed=3, options=None if schedule is None else {"schedule": schedule})
    infos = []
    while True:
        _, _, terminated, truncated, info = env.step(0)
        infos.append(info)
        if terminated or truncated:
            return infos


@pytest.mark.parametrize("n", [1, 8, HORIZON])
def test_env_replays_a_schedule_up_to_the_horizon(n: int) -> None:
    env = gym.make(ENV_ID, schedule=SCHEDULE)
    s = _schedule(n)
    infos = _run_env(env, s)
    assert len(infos) == n
    assert [i["command"] for i in infos] == s.command.tolist()
    assert [i["trial"] for i in infos] == list(range(n))
    assert len(_run_env(env, None)) == HORIZON  # the next user without options has the world's schedule


@pytest.mark.parametrize("n", [HORIZON + 1, 20])
def test_env_reset_refuses_a_longer_replay(n: int) -> None:
    env = gym.make(ENV_ID, schedule=SCHEDULE)
    with pytest.raises(ConfigError, match=_too_long(n, r"reset\(options\['schedule'\]\)")):
        env.reset(seed=1, options={"schedule": _schedule(n)})


@pytest.mark.parametrize("by", ["seeds", "rngs"])
def test_batch_reset_takes_shorter_and_equal_replays(by: str) -> None:
    world = make_world(schedule=SCHEDULE)
    for n in (5, 8, HORIZON):
        sim = BatchSimulator(world)
        kw = {"seeds": [1, 2]} if by == "seeds" else {"rngs": [np.random.default_rng(1), np.random.default_rng(2)]}
        sim.reset(**kw, schedules=[_schedule(n)] * 2)
        assert sim.horizon == n
        for t in range(n):
            np.testing.assert_array_equal(sim.targets(), [t % 3, t % 3])
            sim.step(np.zeros(2, dtype=np.int64))
        assert sim.trial == n


@pytest.mark.parametrize("by", ["seeds", "rngs"])
@pytest.mark.parametrize("n", [HORIZON + 1, 20])
def test_batch_reset_refuses_a_longer_replay_naming_its_position(by: str, n: int) -> None:
    world = make_world(schedule=SCHEDULE)
    kw = {"seeds": [1, 2, 3]} if by == "seeds" else {"rngs": [np.random.default_rng(s) for s in (1, 2, 3)]}
    # the fault is named before the batch's horizons are compared (a longer one among shorter ones)
    with pytest.raises(ConfigError, match=_too_long(n, r"BatchSimulator.reset: schedules\[2\]")):
        BatchSimulator(world).reset(**kw, schedules=[None, _schedule(8), _schedule(n)])


def test_schedule_replay_takes_shorter_schedules_and_refuses_longer() -> None:
    env = ScheduleReplay(gym.make(ENV_ID, schedule=SCHEDULE), [_schedule(HORIZON), _schedule(7)], cycle=False)
    assert [i["command"] for i in _run_env(env, None)] == _schedule(HORIZON).command.tolist()
    assert len(_run_env(env, None)) == 7
    for n in (HORIZON + 1, 20):
        with pytest.raises(ConfigError, match=_too_long(n, r"ScheduleReplay: schedules\[1\]")):
            ScheduleReplay(gym.make(ENV_ID, schedule=SCHEDULE), [_schedule(4), _schedule(n)])
        # a schedule given at reset instead of the sequence's is held to the same rule
        with pytest.raises(ConfigError, match=_too_long(n, r"reset\(options\['schedule'\]\)")):
            env.reset(seed=0, options={"schedule": _schedule(n)})


def _bound(name: str, opts: dict):
    agent = make_agent(name, **opts)
    agent.bind(context_of_world(make_world(schedule=SCHEDULE)))
    return agent


@pytest.mark.parametrize("name,opts", PLANNERS)
def test_planner_agent_in_an_env_loop_past_its_horizon_refuses(name: str, opts: dict) -> None:
    """The agent planned for 12 trials is stepped (its own loop, no rebinding) in a 16-trial env:
    it acts on the first 12 and refuses at the 13th, naming itself."""
    agent = _bound(name, opts)
    env = gym.make(ENV_ID, schedule=LONGER)
    obs, info = env.reset(seed=4)
    agent.reset(4)
    n = 0
    with pytest.raises(ConfigError, match=_too_long(HORIZON + 1, name, at_least=True)):
        while True:
            a = agent.act(obs, info)
            obs2, r, te, tr, info2 = env.step(a)
            agent.observe(Transition(obs, a, r, obs2, info2, te, tr))
            obs, info = obs2, info2
            n += 1
    assert n == HORIZON


def _longer_sim(n_users: int) -> BatchSimulator:
    sim = BatchSimulator(make_world(schedule=LONGER))
    sim.reset(seeds=list(range(n_users)))
    return sim


@pytest.mark.parametrize("name,opts", PLANNERS)
def test_planner_batch_policies_on_a_longer_simulator_refuse(name: str, opts: dict) -> None:
    seeds = [5, 6, 7]
    words = _too_long(HORIZON + 4, name)
    # the compiled whole run, sums only and every trial kept
    with pytest.raises(ConfigError, match=words):
        _bound(name, opts).batch_policy(3, seeds).run(_longer_sim(3))
    policy = _bound(name, opts).batch_policy(3, seeds)
    keep = policy.run_recorded if hasattr(policy, "run_recorded") else lambda sim: policy.run(sim, record=True)
    with pytest.raises(ConfigError, match=words):
        keep(_longer_sim(3))
    # the per-trial batch path: acts on the plan's 12 trials, refuses at the 13th
    policy = _bound(name, opts).batch_policy(3, seeds)
    sim = _longer_sim(3)
    with pytest.raises(ConfigError, match=_too_long(HORIZON + 1, name, at_least=True)):
        for _ in range(sim.horizon):
            targets = sim.targets().copy()
            acts = np.asarray(policy.actions(targets, sim.obs), dtype=np.int64)
            sim.step(acts)
            policy.observe(targets, acts, sim.outcome, -sim.reward)
    assert sim.trial == HORIZON
