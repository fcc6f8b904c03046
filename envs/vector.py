"""A Gymnasium ``VectorEnv`` of many simulated users over the compiled :class:`BatchSimulator`.

Sub-environment ``i`` behaves exactly like ``gymnasium.make("shortcut_gym/CommandSelection-v0")``
inside a ``gymnasium.vector.SyncVectorEnv``: ``reset(seed=s)`` seeds user ``i`` with ``s + i``
(or the i-th seed of a list), later episodes continue the same generator, and each autoreset
draws the next user's schedule from it. All users share one horizon, so they all terminate on the
same step (the schedule's end is a true end, as in the single env; ``truncated`` stays False).
Autoreset modes: next-step (Gymnasium's default), same-step (``final_obs`` and
``final_info`` in the info) and disabled.

:func:`make_sb3_vec_env` wraps the same simulator as a Stable-Baselines3 ``VecEnv`` (SB3 trains
on its own vector interface, not on Gymnasium's).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, cast

import numpy as np
from gymnasium.vector import AutoresetMode, VectorEnv
from gymnasium.vector.utils import batch_space

from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ActionError, ConfigError, UsageError, require_extra
from shortcut_gym.envs.info import (
    UpcomingInfo,
    simulator_step_infos,
    simulator_upcoming_infos,
    step_info,
    upcoming_info,
)
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import World, make_world


def _seed_list(seed: int | Sequence[int | None] | None, n: int) -> list[int | None]:
    if seed is None:
        return [None] * n
    if isinstance(seed, (int, np.integer)):
        return [int(seed) + i for i in range(n)]
    seeds = list(seed)
    if len(seeds) != n:
        raise ConfigError(f"{len(seeds)} seeds given for num_envs={n}")
    return [None if s is None else int(s) for s in seeds]


class CommandSelectionVectorEnv(VectorEnv):
    """``num_envs`` simulated users of one world stepped by one kernel call per step.

    Keyword arguments are those of :class:`CommandSelectionEnv` (``scenario``, ``costs``,
    ``memory``, ``schedule``, ``observe_recall``, ``target_encoding``, ``aids``) or a ready ``world``;
    ``full_info=False`` leaves out the per-user name strings and the operator breakdown (faster).
    """

    def __init__(
        self,
        num_envs: int,
        world: World | None = None,
        autoreset_mode: str | AutoresetMode = AutoresetMode.NEXT_STEP,
        full_info: bool = True,
        **world_kwargs: Any,
    ) -> None:
        if int(num_envs) != num_envs or num_envs < 1:
            raise ConfigError(f"num_envs must be a whole number >= 1, got {num_envs!r}")
        if world is not None and world_kwargs:
            raise ConfigError(f"give either world or world settings, not both (got {sorted(world_kwargs)})")
        self.world = world or make_world(**world_kwargs)
        self.num_envs = int(num_envs)
        self.autoreset_mode = autoreset_mode if isinstance(autoreset_mode, AutoresetMode) else AutoresetMode(
            autoreset_mode
        )
        self.metadata = {"autoreset_mode": self.autoreset_mode, "render_modes": []}
        self.render_mode = None
        self.full_info = full_info
        template = CommandSelectionEnv(world=self.world)
        self.single_observation_space = template.observation_space
        self.single_action_space = template.action_space
        self.observation_space = batch_space(self.single_observation_space, self.num_envs)
        self.action_space = batch_space(self.single_action_space, self.num_envs)
        self.sim = BatchSimulator(self.world)
        self._rngs: list[np.random.Generator] | None = None
        self._autoreset = False
        self._names = np.array(self.world.commands.names, dtype=object)

    # ---- gymnasium VectorEnv API ------------------------------------------------------------
    def reset(
        self, *, seed: int | Sequence[int | None] | None = None, options: dict[str, Any] | None = None
    ) -> tuple[np.ndarray, dict[str, Any]]:
        """Start a new user in every sub-environment (seeds as in ``SyncVectorEnv``)."""
        if options:
            raise ConfigError(f"unknown reset option(s) {sorted(options)}; this vector env takes none")
        seeds = _seed_list(seed, self.num_envs)
        if self._rngs is None or seed is not None:
            self._rngs = [np.random.default_rng(s) for s in seeds]
        self._autoreset = False
        return self._start(), self._upcoming_info()

    def step(self, actions: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, dict[str, Any]]:
        """One trial for every user; autoresets per ``metadata['autoreset_mode']``."""
        if self._rngs is None:
            raise UsageError("call reset() before step()")
        n = self.num_envs
        false = np.zeros(n, dtype=np.bool_)
        if self._autoreset:
            if self.autoreset_mode == AutoresetMode.DISABLED:
                raise UsageError("the horizon is reached; call reset() (autoreset is disabled)")
            self._autoreset = False
            return self._start(), np.zeros(n), false, false.copy(), self._upcoming_info()
        acts = np.asarray(actions)
        if acts.shape != (n,) or not np.issubdtype(acts.dtype, np.integer):
            raise ActionError(f"expected {n} integer actions in 0 (menu), 1 (hotkey), 2 (learn); got {actions!r}")
        t = self.sim.trial
        rewards = self.sim.step(acts).copy()
        terminated = np.full(n, t + 1 >= self.sim.horizon, dtype=np.bool_)
        info = self._step_info(t, acts)
        obs = self.sim.obs.copy()
        if terminated[0]:
            if self.autoreset_mode == AutoresetMode.SAME_STEP:
                ones = np.ones(n, dtype=np.bool_)
                final = {"final_obs": obs, "_final_obs": ones, "final_info": info, "_final_info": ones.copy()}
                obs = self._start()
                info = {**final, **self._upcoming_info()}
            else:
                self._autoreset = True
        return obs, rewards, terminated, false, info

    def close_extras(self, **kwargs: Any) -> None:
        """Nothing to release (the simulator holds only arrays)."""

    def _start(self) -> np.ndarray:
        """Draw the next user of every sub-environment from its generator."""
        obs = self.sim.reset(rngs=self._rngs).copy()
        self._sessions = self.sim.sched_session  # (users, horizon), no per-user Schedule object
        return obs

    # ---- info dicts in gymnasium's vector layout (arrays plus '_key' masks) ------------------
    def _masked(self, items: dict[str, Any]) -> dict[str, Any]:
        out: dict[str, Any] = {}
        ones = np.ones(self.num_envs, dtype=np.bool_)
        for key, value in items.items():
            out[key] = value
            out[f"_{key}"] = ones.copy()
        return out

    def _upcoming_info(self) -> dict[str, Any]:
        return self._masked(dict(self._upcoming()))

    def _upcoming(self) -> UpcomingInfo:
        sim = self.sim
        targets = sim.targets().astype(np.int64)
        t = sim.trial
        tt = min(t, sim.horizon - 1)
        return upcoming_info(targets, self._names[targets] if self.full_info else None,
                             np.full(self.num_envs, t, dtype=np.int64), sim.sched_onset[:, tt].copy(),
                             self._sessions[:, tt].copy())

    def _step_info(self, t: int, acts: np.ndarray) -> dict[str, Any]:
        sim = self.sim
        cmd = sim.sched_command[:, t].astype(np.int64)
        full = self.full_info
        info = step_info(
            self._upcoming(), np.full(self.num_envs, t, dtype=np.int64), self._sessions[:, t].copy(),
            sim.sched_onset[:, t].copy(), cmd, self._names[cmd] if full else None, acts.astype(np.int64),
            np.array(k.OUTCOME_NAMES, dtype=object)[sim.outcome] if full else sim.outcome.copy(),
            -sim.reward.copy(), sim.p_recall.copy(),
            self._masked({name: sim.operator_time_s[:, j].copy() for j, name in enumerate(k.OPERATOR_NAMES)})
            if full else None,
        )
        return self._masked(dict(info))


_SB3_CLASS: type | None = None


def _sb3_class() -> type:
    """Build the SB3 adapter class on first use (importing SB3 imports torch)."""
    global _SB3_CLASS
    if _SB3_CLASS is not None:
        return _SB3_CLASS
    require_extra("stable_baselines3", "rl")
    from stable_baselines3.common.vec_env.base_vec_env import VecEnv as SB3VecEnv

    class CommandSelectionSB3VecEnv(SB3VecEnv):
        """Stable-Baselines3 ``VecEnv`` of ``num_envs`` simulated users (same numbers as a
        ``DummyVecEnv`` of ``CommandSelection-v0`` envs given the same seeds). The schedule's end
        is a true end: ``TimeLimit.truncated`` is False, so SB3 does not bootstrap past it."""

        def __init__(self, num_envs: int, world: World) -> None:
            self.world = world
            self.render_mode = None
            template = CommandSelectionEnv(world=world)
            super().__init__(int(num_envs), template.observation_space, template.action_space)
            self.sim = BatchSimulator(world)
            self._rngs: list[np.random.Generator] | None = None
            self._actions: np.ndarray | None = None
            self._names = world.commands.names

        def reset(self) -> np.ndarray:
            if self._rngs is None or any(s is not None for s in self._seeds):
                self._rngs = [np.random.default_rng(s) for s in self._seeds]
            self._reset_seeds()
            self._reset_options()
            obs = self.sim.reset(rngs=self._rngs).copy()
            self.reset_infos = [dict(i) for i in simulator_upcoming_infos(self.sim, self._names)]
            return obs

        def step_async(self, actions: np.ndarray) -> None:
            self._actions = np.asarray(actions).reshape(self.num_envs).astype(np.int64)

        def step_wait(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[dict[str, Any]]]:
            if self._rngs is None or self._actions is None:
                raise UsageError("call reset() and step_async() before step_wait()")
            t = self.sim.trial
            rewards = self.sim.step(self._actions).astype(np.float32)
            done = t + 1 >= self.sim.horizon
            obs = self.sim.obs.copy()
            # the contract's info of each user, plus SB3's flag (False: the schedule's end is a true end)
            infos = cast(list[dict[str, Any]], simulator_step_infos(self.sim, t, self._actions, self._names))
            for info in infos:
                info["TimeLimit.truncated"] = False
            if done:
                for i in range(self.num_envs):
                    infos[i]["terminal_observation"] = obs[i]
                obs = self.sim.reset(rngs=self._rngs).copy()
                self.reset_infos = [dict(i) for i in simulator_upcoming_infos(self.sim, self._names)]
            self._actions = None
            return obs, rewards, np.full(self.num_envs, done), infos

        def close(self) -> None:
            return None

        def get_attr(self, attr_name: str, indices: Any = None) -> list[Any]:
            return [getattr(self, attr_name) for _ in self._get_indices(indices)]

        def set_attr(self, attr_name: str, value: Any, indices: Any = None) -> None:
            raise AttributeError(f"cannot set {attr_name!r} on the simulated users of a batched VecEnv")

        def env_method(self, method_name: str, *args: Any, indices: Any = None, **kwargs: Any) -> list[Any]:
            raise AttributeError(f"the batched VecEnv has no per-user env to call {method_name!r} on")

        def env_is_wrapped(self, wrapper_class: type, indices: Any = None) -> list[bool]:
            return [False for _ in self._get_indices(indices)]

    _SB3_CLASS = CommandSelectionSB3VecEnv
    return _SB3_CLASS


def make_sb3_vec_env(num_envs: int, world: World | None = None, seed: int | None = None, **world_kwargs: Any) -> Any:
    """A Stable-Baselines3 ``VecEnv`` over the batched simulator (``seed`` seeds user i with seed + i)."""
    if int(num_envs) != num_envs or num_envs < 1:
        raise ConfigError(f"num_envs must be a whole number >= 1, got {num_envs!r}")
    if world is not None and world_kwargs:
        raise ConfigError(f"give either world or world settings, not both (got {sorted(world_kwargs)})")
    venv = _sb3_class()(num_envs, world or make_world(**world_kwargs))
    if seed is not None:
        venv.seed(seed)
    return venv
