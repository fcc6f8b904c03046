"""Stable-Baselines3's own helpers on the registered id: make_vec_env (Dummy and Subproc), PPO through it."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest

from shortcut_gym.envs import ENV_ID

PREFIXED_ID = f"shortcut_gym:{ENV_ID}"
SHORT = {"sessions": 1, "trials_per_session": 8}


def _rollout(venv, steps: int) -> np.ndarray:
    venv.action_space.seed(0)
    obs = venv.reset()
    total = np.zeros(venv.num_envs)
    for _ in range(steps):
        obs, reward, done, infos = venv.step(np.array([venv.action_space.sample() for _ in range(venv.num_envs)]))
        total += reward
    return total


def test_make_vec_env_with_the_plain_id_renders_pictures() -> None:
    from stable_baselines3.common.env_util import make_vec_env

    venv = make_vec_env(ENV_ID, n_envs=3, seed=0, env_kwargs={"schedule": SHORT})
    assert venv.get_attr("render_mode") == ["rgb_array"] * 3  # SB3's default, which the env now accepts
    obs = venv.reset()
    assert obs.shape == (3, venv.observation_space.shape[0])
    frames = venv.get_images()
    assert len(frames) == 3 and all(f.ndim == 3 and f.shape[2] == 3 and f.dtype == np.uint8 for f in frames)
    assert not np.array_equal(frames[0], frames[1])  # seeds 0, 1, 2: different users, different targets
    # an episode ends at the horizon and the Monitor reports its return
    for _ in range(SHORT["trials_per_session"] - 1):
        _, _, done, _ = venv.step(np.zeros(3, dtype=np.int64))
        assert not done.any()
    _, _, done, infos = venv.step(np.zeros(3, dtype=np.int64))
    assert done.all() and all(i["episode"]["l"] == SHORT["trials_per_session"] for i in infos)
    # the schedule's end is a true end: SB3 must not bootstrap past it
    assert not any(i["TimeLimit.truncated"] for i in infos)
    venv.close()


@pytest.mark.parametrize(("env_id", "start_method"), [(PREFIXED_ID, None), (ENV_ID, "fork")])
def test_subproc_vec_env_matches_dummy_vec_env(env_id, start_method) -> None:
    """Workers started by forkserver (SB3's default) import the package through the prefixed id;
    forked workers inherit the registration, so the plain id works there."""
    from stable_baselines3.common.env_util import make_vec_env
    from stable_baselines3.common.vec_env import DummyVecEnv, SubprocVecEnv

    kwargs = {} if start_method is None else {"start_method": start_method}
    sub = make_vec_env(env_id, n_envs=2, seed=7, env_kwargs={"schedule": SHORT}, vec_env_cls=SubprocVecEnv,
                       vec_env_kwargs=kwargs)
    dummy = make_vec_env(ENV_ID, n_envs=2, seed=7, env_kwargs={"schedule": SHORT}, vec_env_cls=DummyVecEnv)
    try:
        # DummyVecEnv keeps rewards in float32 buffers, SubprocVecEnv stacks the float64 ones
        np.testing.assert_allclose(_rollout(sub, 12), _rollout(dummy, 12), rtol=1e-6)
    finally:
        sub.close()
        dummy.close()


def test_ppo_trained_through_make_vec_env_beats_always_menu() -> None:
    """Plain SB3 usage: make_vec_env + VecNormalize + PPO on 2 sessions x 40 trials, 20,000 steps."""
    import torch
    from stable_baselines3 import PPO
    from stable_baselines3.common.env_util import make_vec_env
    from stable_baselines3.common.vec_env import VecNormalize

    torch.set_num_threads(1)
    schedule = {"sessions": 2, "trials_per_session": 40}
    venv = VecNormalize(make_vec_env(ENV_ID, n_envs=8, seed=0, env_kwargs={"schedule": schedule}), gamma=0.99)
    model = PPO("MlpPolicy", venv, seed=0, device="cpu", n_steps=128, batch_size=256, learning_rate=1e-3,
                n_epochs=10, ent_coef=0.01)
    model.learn(20_000)
    venv.training = False
    env = gym.make(ENV_ID, schedule=schedule)

    def episode_s(policy, seed: int) -> float:
        obs, _ = env.reset(seed=seed)
        total = 0.0
        while True:
            obs, reward, terminated, truncated, _ = env.step(policy(obs))
            total -= reward
            if terminated or truncated:
                return total

    seeds = range(100, 116)
    ppo = np.mean([episode_s(lambda o: int(model.predict(venv.normalize_obs(o), deterministic=True)[0]), s)
                   for s in seeds])
    menu = np.mean([episode_s(lambda o: 0, s) for s in seeds])
    assert ppo < menu
