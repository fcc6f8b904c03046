"""Optional trial-time noise: lognormal factors of mean 1 on a trial's time, from their own stream."""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents import make_agent, run_episode
from shortcut_gym.agents.rollout import context_of_world, drive_batch
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.sweep.batch import simulate_users
from shortcut_gym.lab.sweep.spec import apply_overrides

SCHEDULE = {"sessions": 2, "trials_per_session": 30}
OPS = ["t_M", "t_K", "t_P", "t_B", "t_H", "t_search", "t_decision", "t_pointing", "t_retrieval", "t_encoding"]


def _worlds(cv: float = 0.3):
    return make_world(schedule=SCHEDULE), make_world(schedule=SCHEDULE, costs={"noise": {"cv": cv}})


def test_noise_changes_only_the_times_and_keeps_every_other_draw():
    quiet, noisy = _worlds()
    for name in ("random", "learn_first_k"):
        a = run_episode(CommandSelectionEnv(world=quiet), make_agent(name), seed=3)
        b = run_episode(CommandSelectionEnv(world=noisy), make_agent(name), seed=3)
        for col in ("command", "action", "outcome", "p_recall", "onset_s"):
            assert (a[col] == b[col]).all(), col
        factor = b["duration_s"] / a["duration_s"]
        assert factor.std() > 0.1
        np.testing.assert_allclose(b[OPS].sum(axis=1), b["duration_s"], rtol=1e-12)
        np.testing.assert_allclose(b[OPS].to_numpy(), a[OPS].to_numpy() * factor.to_numpy()[:, None], rtol=1e-12)


def test_without_noise_the_factors_are_ones_and_times_are_the_model_times():
    quiet, _ = _worlds()
    sim = BatchSimulator(quiet)
    sim.reset(seeds=[0, 1])
    assert (sim.sched_noise == 1.0).all()
    rows = run_episode(CommandSelectionEnv(world=quiet), make_agent("random"), seed=1)
    np.testing.assert_allclose(rows[OPS].sum(axis=1).to_numpy(), rows["duration_s"].to_numpy(), rtol=1e-14)


@pytest.mark.parametrize("cv", [0.1, 0.5])
def test_factors_have_mean_one_and_the_set_coefficient_of_variation(cv):
    _, noisy = _worlds(cv)
    sim = BatchSimulator(noisy)
    sim.reset(seeds=list(range(200)))
    f = sim.sched_noise.ravel()  # 12,000 lognormal draws
    se_mean = cv / np.sqrt(len(f))
    assert abs(f.mean() - 1.0) < 4 * se_mean
    assert f.std() / f.mean() == pytest.approx(cv, rel=0.08)
    assert (f > 0).all()


def test_env_batch_loop_and_fused_runs_agree_with_noise_on():
    _, noisy = _worlds()
    seeds = [4, 5, 6]
    ctx = context_of_world(noisy)
    for name in ("rescorla_wagner", "learn_first_k"):
        env_totals = [run_episode(CommandSelectionEnv(world=noisy), make_agent(name, ctx), seed=s)["duration_s"].sum()
                      for s in seeds]
        for fused in (True, False):
            sim = BatchSimulator(noisy)
            sim.reset(seeds=seeds)
            sums = drive_batch(sim, make_agent(name, ctx), seeds, fused=fused).sums
            np.testing.assert_allclose(sums.time_s.sum(axis=1), env_totals, rtol=1e-12)


def test_unseeded_resets_draw_fresh_noise_and_reseeding_repeats_it():
    _, noisy = _worlds()
    env = CommandSelectionEnv(world=noisy)
    env.reset(seed=9)
    first = env._sim.sched_noise.copy()
    env.reset()
    assert not np.array_equal(env._sim.sched_noise, first)
    env.reset(seed=9)
    np.testing.assert_array_equal(env._sim.sched_noise, first)


def test_sweeps_vary_the_noise_by_its_dotted_path():
    base = {"scenario": "tidepool_logbook", "costs": make_world().costs.model_dump(), "schedule": SCHEDULE}
    settings = apply_overrides(base, {"costs.noise.cv": 0.4})
    assert settings["costs"]["noise"]["cv"] == 0.4
    quiet, noisy = _worlds(0.4)
    a = simulate_users(quiet, {"name": "learn_first_k"}, [0, 1, 2])
    b = simulate_users(noisy, {"name": "learn_first_k"}, [0, 1, 2])
    assert not np.allclose(a.time_s, b.time_s)
    np.testing.assert_array_equal(a.outcomes, b.outcomes)


@pytest.mark.parametrize("bad", [-0.1, "lots", 6.0])
def test_bad_noise_settings_name_the_field(bad):
    with pytest.raises(ConfigError, match=r"noise\.cv"):
        make_world(costs={"noise": {"cv": bad}})
