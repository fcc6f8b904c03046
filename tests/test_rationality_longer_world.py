"""The yardstick on a base world whose schedule is longer than a participant's log: the planner plans
for the world's horizon and its optimum time counts the logged trials only."""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.base import Transition
from shortcut_gym.agents.planned_choice import cached_plan
from shortcut_gym.agents.rollout import drive_batch
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import participant_trials, schedule_of, validate_log
from shortcut_gym.lab.rationality import PlannerOptions
from shortcut_gym.lab.rationality.analysis import continued_schedule, simulated_time_lost

OPTIONS = PlannerOptions(n_bins=6, n_weight_bins=2)
SHORT = {"sessions": 2, "trials_per_session": 10, "trial_interval_s": 30.0, "gap_h": 3.0}


@pytest.fixture(scope="module")
def logged():
    """One always-menu participant's 20 logged trials (2 sessions of 10)."""
    short = make_world(schedule=SHORT)
    log = validate_log(simulate_log(short, make_agent("always_menu"), 1, np.random.default_rng(2), prefix="m"),
                       short.commands)
    return participant_trials(log, log["participant"].iloc[0])


def test_a_continued_schedule_keeps_the_logged_trials_and_runs_on_in_a_session_of_its_own(logged) -> None:
    schedule = schedule_of(logged)
    for horizon, command in ((20, None), (21, None), (35, 3)):
        longer = continued_schedule(schedule, horizon, command)
        assert longer.horizon == horizon
        for field in ("command", "onset_s", "session", "gap_total_s"):
            np.testing.assert_array_equal(getattr(longer, field)[:20], getattr(schedule, field))
        extra = longer.command[20:]
        assert (extra == (schedule.command[-1] if command is None else command)).all()
        assert (longer.session[20:] == schedule.session.max() + 1).all()
        np.testing.assert_allclose(np.diff(longer.onset_s[19:]), 30.0)  # the logged within-session interval
    with pytest.raises(ConfigError, match="a participant has 20 trials, the world's schedule only 19"):
        continued_schedule(schedule, 19)


def _first_trials_total(world, schedule, n: int, seeds: list[int]) -> np.ndarray:
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds, schedules=[schedule] * len(seeds))
    planner = cached_plan(world, OPTIONS.keyboard_share, OPTIONS.n_bins, OPTIONS.n_weight_bins, OPTIONS.select_users)
    kept = drive_batch(sim, planner, seeds, keep_trials=True).trials
    assert kept is not None
    return kept.duration_s[:, :n].sum(axis=1)


def test_the_optimum_time_counts_the_logged_trials_whatever_follows_them(logged) -> None:
    longer = make_world(schedule={**SHORT, "sessions": 4})  # 40 trials against 20 logged
    loss = simulated_time_lost(logged, longer, OPTIONS, 8, seed=5)
    mean, se = loss.optimum_s, loss.lost_se
    seeds = [int(x) for x in np.random.SeedSequence([5, 0x71AE]).generate_state(8)]
    schedule = schedule_of(logged)
    for command in (0, 7, 11):  # other continuations: the first 20 trials' times do not move
        totals = _first_trials_total(longer, continued_schedule(schedule, 40, command), 20, seeds)
        assert totals.mean() == pytest.approx(mean, rel=1e-12)
        assert totals.std(ddof=1) / np.sqrt(8) == pytest.approx(se, rel=1e-9)


def test_on_an_equal_horizon_the_kept_durations_are_the_summed_time(logged) -> None:
    short = make_world(schedule=SHORT)
    loss = simulated_time_lost(logged, short, OPTIONS, 6, seed=1)
    mean, _ = loss.optimum_s, loss.lost_se
    seeds = [int(x) for x in np.random.SeedSequence([1, 0x71AE]).generate_state(6)]
    assert _first_trials_total(short, schedule_of(logged), 20, seeds).mean() == pytest.approx(mean, rel=1e-12)


def test_the_optimum_time_in_a_longer_world_matches_the_gymnasium_env(logged) -> None:
    """Independent path: the env replays the continued schedule with the planner; the first 20
    trials' seconds (minus the rewards) averaged over other seeds agree within 4 standard errors."""
    longer = make_world(schedule={**SHORT, "sessions": 3})
    loss = simulated_time_lost(logged, longer, OPTIONS, 40, seed=3)
    mean, se = loss.optimum_s, loss.lost_se
    env = CommandSelectionEnv(world=longer)
    planner = cached_plan(longer, None, OPTIONS.n_bins, OPTIONS.n_weight_bins, OPTIONS.select_users)
    schedule = continued_schedule(schedule_of(logged), longer.horizon)
    totals = []
    for k in range(40):
        env.reset(seed=500 + k, options={"schedule": schedule})
        planner.reset(k)
        obs, info = env.unwrapped._sim.obs[0].copy(), env.unwrapped._upcoming_info()
        total = 0.0
        for _ in range(20):
            a = planner.act(obs, info)
            nxt, r, term, trunc, step = env.step(a)
            planner.observe(Transition(obs, a, r, nxt, step, term, trunc))
            total -= r
            obs, info = nxt, step
        totals.append(total)
    env_se = np.std(totals, ddof=1) / np.sqrt(len(totals))
    assert np.mean(totals) == pytest.approx(mean, abs=4 * np.hypot(se, env_se) + 1e-9)
