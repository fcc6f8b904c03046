"""Replayed schedules with their own onsets: the planners act the same on every path.

A replay (a schedule read from a trial log, :class:`~shortcut_gym.envs.wrappers.ScheduleReplay`)
carries each trial's onset, session and gap time. The simulator runs the user's memory on the
replay's clock; the planner tracks that memory on its own clock, the world's schedule's at the
trial index (``planned_choice``'s docstring: "the planner reads the schedule's clock at the trial
index"), in its Python code (``decide`` / ``observe``, the per-trial batch path) and in its compiled
rebuild (tables made from the agent's clock). This checks, for ``bounded_optimal`` and
``planned_choice`` on replays with longer and shorter gaps, irregular sessions and a replay shorter
than the horizon, that three independent drivers give the same action and duration on every trial:

* the compiled fused run (every trial recorded),
* the per-trial batch path (``drive_batch(..., fused=False)``),
* a plain gymnasium loop: ``gymnasium.make`` wrapped in ``ScheduleReplay``, one user at a time,
  ``agent.act`` / ``agent.observe`` on the env's own info dicts.

The check has power: the replays change what the simulated user experiences (their recall
probabilities differ from the default schedule's on the same targets), and a planner made to read
the replay's clock instead of its own takes other actions on some of these cases, so a path reading
the other clock would fail the equality.
"""

from __future__ import annotations

from typing import Any

import gymnasium as gym
import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.base import Agent, Transition
from shortcut_gym.agents.planned_choice import PlannedChoice
from shortcut_gym.agents.planned_choice_batch import PlannedChoiceBatch
from shortcut_gym.agents.planner import BoundedOptimalPlanner
from shortcut_gym.agents.planner.compiled_lookup import CompiledPlanLookup
from shortcut_gym.agents.planner.next_uses import next_use_points
from shortcut_gym.agents.rollout import context_of_world, drive_batch
from shortcut_gym.envs import ENV_ID, BatchSimulator, ScheduleReplay, make_world
from shortcut_gym.envs.task import Schedule

SEEDS = [2, 11, 303]
SCHEDULE = {"sessions": 3, "trials_per_session": 14, "gap_h": [20.0, 0.5]}  # the world's default: 42 trials
CHEAP = {"learn": {"encoding_s": 1.5}}  # learning pays often enough that every action occurs
#: the worlds: ACT-R memory on the onsets, and with session gaps scaled (memory clock != onset)
WORLDS: dict[str, dict[str, Any]] = {
    "actr": {"schedule": SCHEDULE, "costs": CHEAP},
    "actr-gap-scaled": {"schedule": SCHEDULE, "costs": CHEAP, "memory": {"kind": "actr", "gap_time_scale": 0.1}},
}
AGENTS: dict[str, dict[str, Any]] = {
    "bounded_optimal": {"n_bins": 8, "n_weight_bins": 3, "select_users": 0},
    "planned_choice": {"beta": 3.0, "n_bins": 8, "n_weight_bins": 3},
}


def _timing(kind: str, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(onset_s, session, gap_total_s) of a replay unlike the world's default schedule."""
    if kind == "longer_gaps":  # week-long and three-day gaps, 5 min between trials
        sizes, steps, gaps_h = [14, 14, 14], [300.0] * 3, [168.0, 72.0]
    elif kind == "shorter_gaps":  # 6 and 1.2 minute breaks, 10 s between trials
        sizes, steps, gaps_h = [14, 14, 14], [10.0] * 3, [0.1, 0.02]
    elif kind == "irregular":  # five sessions of uneven length, jittered trial spacing
        sizes, steps, gaps_h = [5, 12, 3, 15, 7], [20.0, 90.0, 600.0, 45.0, 5.0], [2.0, 150.0, 0.3, 30.0]
    elif kind == "shorter_than_horizon":  # a log cut short after 17 trials, in two sessions
        sizes, steps, gaps_h = [9, 8], [40.0, 120.0], [96.0]
    else:
        raise ValueError(kind)
    onset, session, gap_total = [], [], []
    now, gap_s = 0.0, 0.0
    for s, (n, step) in enumerate(zip(sizes, steps, strict=True)):
        if s > 0:
            gap_s += gaps_h[s - 1] * 3600.0
            now += gaps_h[s - 1] * 3600.0
        for _ in range(n):
            onset.append(now)
            session.append(s)
            gap_total.append(gap_s)
            now += step * (0.5 + rng.random()) if kind == "irregular" else step
    return np.array(onset), np.array(session, dtype=np.int64), np.array(gap_total)


REPLAYS = ["longer_gaps", "shorter_gaps", "irregular", "shorter_than_horizon"]


def _replays(world: Any, kind: str) -> list[Schedule]:
    """One replay per user: the targets the world draws for the user's seed, the replay's timing."""
    sim = BatchSimulator(world)
    sim.reset(seeds=SEEDS)
    onset, session, gap_total = _timing(kind, np.random.default_rng(7))
    n = len(onset)
    assert n <= world.horizon
    return [Schedule(sim.sched_command[b, :n].copy(), onset, session, gap_total) for b in range(len(SEEDS))]


def _sim(world: Any, replays: list[Schedule] | None) -> BatchSimulator:
    sim = BatchSimulator(world)
    sim.reset(seeds=SEEDS, schedules=replays)
    return sim


def _agent(world: Any, name: str) -> Agent:
    return make_agent(name, context_of_world(world), **AGENTS[name])


def _compiled(world: Any, name: str, replays: list[Schedule]) -> tuple[np.ndarray, np.ndarray]:
    """(actions, durations) of every trial of the compiled fused run."""
    agent = _agent(world, name)
    policy = agent.batch_policy(len(SEEDS), SEEDS)  # type: ignore[attr-defined]
    if name == "planned_choice":
        assert isinstance(policy, PlannedChoiceBatch)
        _, kept = policy.run_recorded(_sim(world, replays))
        return kept.action, kept.duration_s
    assert isinstance(policy, CompiledPlanLookup)
    sums = policy.run(_sim(world, replays), record=True)
    actions = policy.recorded
    # the durations of those actions on the same users (the simulator is deterministic given the actions)
    sim = _sim(world, replays)
    durations = np.empty(actions.shape)
    for t in range(sim.horizon):
        sim.step(actions[:, t])
        durations[:, t] = -sim.reward
    per_session = np.zeros_like(sums.time_s)
    for b in range(len(SEEDS)):
        np.add.at(per_session[b], sim.sched_session[b], durations[b])
    np.testing.assert_allclose(sums.time_s, per_session, rtol=1e-12)  # the run's own sums say the same
    return actions, durations


def _stepped(world: Any, name: str, replays: list[Schedule]) -> tuple[np.ndarray, np.ndarray]:
    """(actions, durations) of the per-trial batch path."""
    kept = drive_batch(_sim(world, replays), _agent(world, name), SEEDS, fused=False, keep_trials=True).trials
    assert kept is not None
    return kept.action, kept.duration_s


def _gym_loop(world: Any, agent: Agent, replays: list[Schedule]) -> tuple[np.ndarray, np.ndarray]:
    """(actions, durations) of a plain gymnasium loop, one user at a time, replaying ``replays``."""
    env = ScheduleReplay(gym.make(ENV_ID, world=world), replays, cycle=False)
    actions, durations = [], []
    for seed in SEEDS:
        obs, info = env.reset(seed=seed)
        agent.reset(seed)
        acts, durs = [], []
        done = False
        while not done:
            a = agent.act(obs, info)
            next_obs, reward, terminated, truncated, info = env.step(a)
            agent.observe(Transition(obs, a, float(reward), next_obs, info, terminated, truncated))
            acts.append(a)
            durs.append(info["duration_s"])
            assert durs[-1] == -reward
            obs, done = next_obs, terminated or truncated
        actions.append(acts)
        durations.append(durs)
    return np.array(actions), np.array(durations)


@pytest.mark.parametrize("replay", REPLAYS)
@pytest.mark.parametrize("world_name", list(WORLDS))
@pytest.mark.parametrize("name", list(AGENTS))
def test_compiled_stepped_and_gym_loop_agree_on_a_replay(name: str, world_name: str, replay: str) -> None:
    world = make_world(**WORLDS[world_name])
    replays = _replays(world, replay)
    compiled = _compiled(world, name, replays)
    stepped = _stepped(world, name, replays)
    looped = _gym_loop(world, _agent(world, name), replays)
    n = replays[0].horizon
    for what, (acts, durs) in {"compiled": compiled, "stepped": stepped}.items():
        assert acts.shape == (len(SEEDS), n), what
        np.testing.assert_array_equal(acts, looped[0], err_msg=f"{what} actions")
        np.testing.assert_array_equal(durs, looped[1], err_msg=f"{what} durations")


def test_the_replays_change_what_the_user_experiences() -> None:
    # the same targets and actions on the replay's clock and on the default one: other recall
    # probabilities (the replays really differ in time, so the equality above is not about nothing)
    for world_name in WORLDS:
        world = make_world(**WORLDS[world_name])
        for replay in REPLAYS:
            replays = _replays(world, replay)
            n = replays[0].horizon
            base = _sim(world, None)  # the world's default timing, the same for every user
            default = [Schedule(r.command, base.sched_onset[0, :n].copy(), base.sched_session[0, :n].copy(),
                                base.sched_gap[0, :n].copy()) for r in replays]
            recall = []
            for schedules in (replays, default):
                sim = _sim(world, schedules)
                p = np.empty((len(SEEDS), n))
                for t in range(n):
                    sim.step(np.ones(len(SEEDS), dtype=np.int64))  # hotkey every trial
                    p[:, t] = sim.p_recall
                recall.append(p)
            assert not np.array_equal(recall[0], recall[1]), (world_name, replay)


def _read_replay_clock(planner: BoundedOptimalPlanner, schedule: Schedule) -> None:
    """Make a reset planner track memory on ``schedule``'s clock (continued past its end one step
    apart, to the planner's horizon) instead of its own: the other clock a path could read."""
    world = planner._world()
    h = world.horizon
    n = schedule.horizon
    clock = np.empty(h)
    clock[:n] = schedule.memory_clock_s(world.memory.gap_time_scale)
    clock[n:] = clock[n - 1] + 60.0 * np.arange(1, h - n + 1)
    session = np.concatenate([schedule.session, np.full(h - n, schedule.session[-1] + 1)])
    planner._clock, planner._session = clock, session
    planner._next_uses = next_use_points(world, clock)


class _ReplayClockPlanner(BoundedOptimalPlanner):
    """A planner reading each replay's clock (the schedules given in order, one per reset)."""

    def __init__(self, replays: list[Schedule], **options: Any) -> None:
        super().__init__(**options)
        self._replays = list(replays)

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        self._times_for = None  # price again on the next reset (the next-use tables are the replay's)
        _read_replay_clock(self, self._replays[SEEDS.index(seed)] if seed in SEEDS else self._replays[0])


class _ReplayClockChoice(PlannedChoice):
    """A planned choice whose planner reads each replay's clock."""

    def __init__(self, replays: list[Schedule], *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._replays = list(replays)

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        assert self._planner is not None and seed in SEEDS
        _read_replay_clock(self._planner, self._replays[SEEDS.index(seed)])


@pytest.mark.parametrize("name", list(AGENTS))
def test_a_planner_reading_the_replays_clock_would_be_caught(name: str) -> None:
    differing = []
    for world_name in WORLDS:
        world = make_world(**WORLDS[world_name])
        for replay in REPLAYS:
            replays = _replays(world, replay)
            options = dict(AGENTS[name])
            if name == "bounded_optimal":
                other: Agent = _ReplayClockPlanner(replays, **options)
            else:
                beta = options.pop("beta")
                other = _ReplayClockChoice(replays, beta=beta, **options)
            other.bind(context_of_world(world))
            acts, _ = _gym_loop(world, other, replays)
            compiled, _ = _compiled(world, name, replays)
            if not np.array_equal(acts, compiled):
                differing.append((world_name, replay))
    # on these replays the clock matters to the planner's choices: most cases tell the two apart
    assert len(differing) >= len(WORLDS) * len(REPLAYS) // 2, differing
