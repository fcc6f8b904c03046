"""Wrappers: the trial recorder's table and the schedule replay, alone and under SB3."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest

from shortcut_gym.envs import ENV_ID, Schedule
from shortcut_gym.envs.kernel import ACTION_NAMES
from shortcut_gym.envs.wrappers import TRIAL_COLUMNS, ScheduleReplay, TrialRecorder

SMALL = {"schedule": {"sessions": 2, "trials_per_session": 10}}


def _env(**kw) -> gym.Env:
    return gym.make(ENV_ID, **{**SMALL, **kw})


def test_recorder_rows_are_the_steps_infos_in_order() -> None:
    env = TrialRecorder(_env())
    actions = np.random.default_rng(3).integers(0, 3, size=20)
    infos = []
    env.reset(seed=5)
    for a in actions:
        infos.append(env.step(int(a))[4])
    table = env.trials()
    assert list(table.columns) == ["episode", *TRIAL_COLUMNS]
    assert len(table) == 20 and (table["episode"] == 0).all()
    assert table["trial"].tolist() == list(range(20))
    assert table["action"].tolist() == [ACTION_NAMES[a] for a in actions]
    assert table["duration_s"].tolist() == [i["duration_s"] for i in infos]
    assert table["outcome"].tolist() == [i["outcome"] for i in infos]
    # the breakdown by operator adds up to the trial's time
    parts = table[[c for c in table.columns if c.startswith("t_")]].sum(axis=1)
    np.testing.assert_allclose(parts, table["duration_s"], rtol=1e-12)


def test_recorder_numbers_episodes_and_caps_rows_with_a_count() -> None:
    env = TrialRecorder(_env(), max_trials=15)
    for ep in range(3):
        env.reset(seed=ep)
        done = False
        while not done:
            _, _, terminated, truncated, _ = env.step(0)
            done = terminated or truncated
    table = env.trials()
    assert len(table) == 15 and env.dropped == 60 - 15
    assert table["episode"].tolist() == [2] * 15  # the newest rows are the ones kept
    assert table["trial"].tolist() == list(range(5, 20))
    env.clear()
    assert env.trials().empty and env.dropped == 0


def test_recorder_rejects_bad_arguments() -> None:
    with pytest.raises(ValueError, match="max_trials must be a whole number >= 1"):
        TrialRecorder(_env(), max_trials=0)
    with pytest.raises(TypeError, match="wraps a CommandSelection-v0 env, got CartPoleEnv"):
        TrialRecorder(gym.make("CartPole-v1"))
    with pytest.raises(RuntimeError, match="call reset"):
        TrialRecorder(_env()).step(0)


def _schedule(commands: list[int], sessions: int = 2) -> Schedule:
    n = len(commands)
    per = n // sessions
    session = np.repeat(np.arange(sessions), per)
    onset = np.arange(n) * 30.0 + session * 86_400.0
    return Schedule(np.asarray(commands, dtype=np.int64), onset, session, session * 86_400.0)


def test_replay_gives_each_reset_the_next_schedule_and_cycles() -> None:
    a, b = _schedule([0] * 20), _schedule([1, 2] * 10)
    env = ScheduleReplay(_env(), [a, b])
    for expected in (a, b, a):
        _, info = env.reset(seed=1)
        targets = [info["target"]]
        for _ in range(19):
            targets.append(env.step(0)[4]["target"])
        assert targets == expected.command.tolist()
        np.testing.assert_array_equal(env.unwrapped.schedule.onset_s, expected.onset_s)


def test_replay_without_cycle_stops_and_explicit_schedule_wins() -> None:
    a, b = _schedule([3] * 20), _schedule([4] * 20)
    env = ScheduleReplay(_env(), [a], cycle=False)
    _, info = env.reset(seed=0, options={"schedule": b})
    assert info["target"] == 4 and env.position == 0
    _, info = env.reset(seed=0)
    assert info["target"] == 3
    with pytest.raises(RuntimeError, match="all 1 schedules are used"):
        env.reset(seed=0)


def test_replay_rejects_schedules_that_do_not_fit() -> None:
    with pytest.raises(ValueError, match=r"schedules\[1\]: the replayed schedule has 22 trials, more than the "
                       r"world's horizon of 20 trials"):
        ScheduleReplay(_env(), [_schedule([0] * 10), _schedule([0] * 22)])
    with pytest.raises(ValueError, match=r"schedules\[0\] names commands outside 0\.\.11"):
        ScheduleReplay(_env(), [_schedule([12] * 20)])
    with pytest.raises(TypeError, match=r"schedules\[0\] must be a Schedule, got list"):
        ScheduleReplay(_env(), [[0] * 20])
    with pytest.raises(ValueError, match="at least one schedule"):
        ScheduleReplay(_env(), [])


def test_sb3_evaluation_on_replayed_schedules_is_recorded() -> None:
    """Stable-Baselines3 drives the wrapped env through its own VecEnv; the recorder sees it all."""
    from stable_baselines3 import PPO
    from stable_baselines3.common.evaluation import evaluate_policy
    from stable_baselines3.common.monitor import Monitor

    schedules = [_schedule([0, 1] * 10), _schedule([5] * 20)]
    recorder = TrialRecorder(ScheduleReplay(_env(), schedules))
    monitored = Monitor(recorder)
    model = PPO("MlpPolicy", monitored, n_steps=64, batch_size=32, seed=0, device="cpu")
    recorder.clear()
    rewards, lengths = evaluate_policy(model, monitored, n_eval_episodes=2, deterministic=True,
                                       return_episode_rewards=True)
    table = recorder.trials()
    assert lengths == [20, 20]
    per_episode = table.groupby("episode")
    assert [g["command"].tolist() for _, g in per_episode][-2:] in (
        [schedules[0].command.tolist(), schedules[1].command.tolist()],
        [schedules[1].command.tolist(), schedules[0].command.tolist()],
    )
    np.testing.assert_allclose(sorted(-np.asarray(rewards)),
                               sorted(per_episode["duration_s"].sum().to_numpy()), rtol=1e-5)
