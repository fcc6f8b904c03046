"""Training an SB3 model on batched users of a world, with optional observation/reward normalisation.

Training runs on ``n_envs`` batched users (``envs.vector.make_sb3_vec_env``) and, with
``normalize`` on, through SB3's ``VecNormalize`` of observations and rewards: without it PPO
settles on always-menu in short budgets on this task (measured while building the adapter). The
observation statistics are frozen after training and returned for saving beside the model.
Progress bars use tqdm (SB3's own bar needs ``rich``, which is not a dependency). What SB3
refuses in its settings while building or training (its asserts, a ValueError: ``n_steps * n_envs``
of 1, episodic ``train_freq`` on several users) comes back as a ConfigError naming the algorithm.
"""

from __future__ import annotations

from typing import Any

from shortcut_gym.agents.sb3.algorithms import algorithm_classes
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World


def tqdm_callback(total_timesteps: int, desc: str) -> Any:
    """An SB3 callback drawing a tqdm bar over environment steps."""
    from stable_baselines3.common.callbacks import BaseCallback
    from tqdm.auto import tqdm

    class _Bar(BaseCallback):
        def _on_training_start(self) -> None:
            self.bar = tqdm(total=total_timesteps, desc=desc, unit="step")

        def _on_step(self) -> bool:
            self.bar.update(self.training_env.num_envs)
            return True

        def _on_training_end(self) -> None:
            self.bar.close()

    return _Bar()


def train_model(algorithm: str, hyperparameters: dict[str, Any], world: World, total_timesteps: int, seed: int,
                n_envs: int, normalize: bool, model: Any = None,
                progress_desc: str | None = None) -> tuple[Any, dict[str, Any] | None]:
    """Learn ``total_timesteps`` steps on ``n_envs`` users of ``world`` (a new model unless ``model``
    is given); returns the model and, with ``normalize``, the frozen observation statistics
    (mean, var, clip, epsilon). ``progress_desc`` draws a tqdm bar with that label."""
    from shortcut_gym.envs.vector import make_sb3_vec_env

    algos = algorithm_classes()
    venv = make_sb3_vec_env(int(n_envs), world=world, seed=seed)
    if normalize:
        from stable_baselines3.common.vec_env import VecNormalize

        venv = VecNormalize(venv, norm_obs=True, norm_reward=True, gamma=hyperparameters.get("gamma", 0.99))
    cls = algos[algorithm]

    def refused(err: Exception) -> ConfigError:
        return ConfigError(f"{algorithm}: stable_baselines3.{cls.__name__} refused its settings on {n_envs} "
                           f"parallel users: {err} (hyperparameters {hyperparameters})")

    if model is None:
        try:
            model = cls("MlpPolicy", venv, seed=seed, verbose=0, device="cpu", **hyperparameters)
        except (AssertionError, ValueError, TypeError) as err:  # SB3 checks its settings with assert
            raise refused(err) from err
    else:
        model.set_env(venv)
    callback = tqdm_callback(total_timesteps, progress_desc) if progress_desc is not None else None
    try:
        model.learn(total_timesteps=int(total_timesteps), callback=callback)
    except AssertionError as err:  # e.g. episodic train_freq on several users
        raise refused(err) from err
    if not normalize:
        return model, None
    rms = venv.obs_rms
    return model, {"mean": rms.mean.copy(), "var": rms.var.copy(), "clip": float(venv.clip_obs),
                   "epsilon": float(venv.epsilon)}
