"""Tabular Q-learning and SARSA over a discretised observation (own numpy code, seeded).

Q-learning: Watkins & Dayan (1992), "Q-learning", Machine Learning 8; SARSA: Rummery & Niranjan
(1994), "On-line Q-learning using connectionist systems"; both as in Sutton & Barto (2018),
*Reinforcement Learning*, 2nd ed., ch. 6.

State = (target command, learn count 0/1/2+, hotkey successes 0/1/2-4/5+, hotkey failures 0/1+,
time since the command's last use: never / < 1 h / >= 1 h), read from the observation's
``log1p_*`` features (located through ``context.obs_names``). Behaviour: epsilon-greedy, so
``action_probabilities`` gives epsilon/3 to every action plus 1 - epsilon to the greedy one
(ties: lowest index).

The task decomposes by command: an action changes that command's memory (and the hand, which
the next trial pays for), so each update bootstraps from the same command's state at its next
use, not from the next trial's, which belongs to another command and would swamp the one-second
differences between actions with the value of unrelated commands. ``discount`` is per use of
the command. The schedule's end is a true end (``terminated``: no bootstrap past a command's last
use); an episode a wrapper truncates leaves its open uses unlearned (their next state is unknown).
``reset`` starts a new episode and keeps the learned table; :meth:`clear` forgets it; updates
happen in ``observe`` only while ``learning`` is True (set by :meth:`train`).

A table never trained nor loaded (or :meth:`clear`-ed) is the initial one: every action valued
``initial_value``, so the greedy choice is the menu by tie. Simulating with it is allowed (a spec's
``model_path: null`` means a new, untrained model) but warns once per process and agent spec
(:class:`UntrainedTableWarning`), on every path: ``reset`` outside training and ``batch_policy``.

``save`` writes the table with the record of the world it was trained on (``world`` entry of the
.npz, :mod:`shortcut_gym.agents.world_record`); a loaded table refuses another world (or a file
without a record) unless ``allow_other_world=True``.
"""

from __future__ import annotations

import json
import threading
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from shortcut_gym.agents.base import Agent, AgentContext, ParamSpec, Transition, check_batch_users
from shortcut_gym.agents.frozen_policy import CELL_FEATURES, FrozenBatchPolicy, cdf_of, cell_rule, frozen_policy
from shortcut_gym.agents.model_files import file_contents, hint_for, model_file_path
from shortcut_gym.agents.rollout import evaluate_agent, run_episode
from shortcut_gym.agents.world_record import WorldRecorded, atomic_path, check_flag, parse_record
from shortcut_gym.envs.errors import ConfigError, DataError, NotReadyError
from shortcut_gym.envs.seeds import check_seeds

_FEATURES = CELL_FEATURES
_EDGES = {  # bucket upper edges (counts or seconds), in feature order
    "log1p_learn_count": [0.5, 1.5],
    "log1p_hotkey_successes": [0.5, 1.5, 4.5],
    "log1p_hotkey_failures": [0.5],
    "log1p_seconds_since_last_use": [0.5, 3600.0],
}
_SIZES = tuple(len(_EDGES[f]) + 1 for f in _FEATURES)


class UntrainedTableWarning(UserWarning):
    """A tabular agent acts with its initial Q table (never trained nor loaded)."""


_WARNED: set[str] = set()  # specs of the untrained agents warned about in this process
_WARNED_LOCK = threading.Lock()  # chunks of users may build their agents on threads


def forget_warned_tables() -> None:
    """Warn again about every untrained agent (the warning is given once per process and spec)."""
    with _WARNED_LOCK:
        _WARNED.clear()


class TabularAgent(WorldRecorded, Agent):
    """Shared machinery of the tabular learners; subclasses set the bootstrap target."""

    name = "tabular"

    def param_specs(self) -> dict[str, ParamSpec]:
        return {
            "learning_rate": ParamSpec("learning_rate", 0.1, 0.0, 1.0, "logit", "step size of the TD update"),
            "discount": ParamSpec("discount", 0.99, 0.0, 1.0, "logit", "discount per use of the command"),
            "epsilon": ParamSpec("epsilon", 0.1, 0.0, 1.0, "logit", "exploration probability"),
            "initial_value": ParamSpec("initial_value", 0.0, -100.0, 100.0, "none", "initial Q (-seconds)"),
        }

    def __init__(self, context: AgentContext | None = None, model_path: str | Path | None = None,
                 allow_other_world: bool = False, **params: float) -> None:
        super().__init__(context, **params)
        self.allow_other_world = check_flag(self.name, allow_other_world)
        self._has_model = False  # a table trained or loaded (not one cleared to its initial values)
        self.learning = False
        self.q: np.ndarray | None = None
        self.model_path = None if model_path is None else str(model_path)
        self._index: list[int] | None = None
        self._open: dict[int, tuple[tuple[int, ...], int, float]] = {}  # command -> its last (s, a, r)
        if self.model_path is not None:
            self.load(self.model_path)

    def bind(self, context: AgentContext) -> None:
        """Attach the world facts; a loaded table must have one row block per command of the world."""
        if self.q is not None and self.q.shape[0] != context.n_commands:
            raise ConfigError(f"{self.name}: the Q table {self.model_path or ''} has {self.q.shape[0]} commands, "
                              f"the world {context.n_commands} (train it on this scenario)")
        self.check_world(context.world)
        super().bind(context)
        self._index = None

    def has_model(self) -> bool:
        """True once the table was trained or loaded."""
        return self._has_model

    def clear(self) -> None:
        """Forget the learned table (back to the initial one: :meth:`has_model` is False again)."""
        if self.context is None:
            raise NotReadyError(f"{self.name}: bind a context before use")
        self.q = np.full((self.context.n_commands, *_SIZES, 3), self.params["initial_value"])
        self._has_model = False

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        if self.q is None:
            self.clear()
        self._open = {}  # updates of an unfinished episode are dropped
        self.warn_if_initial()

    def warn_if_initial(self) -> None:
        """Warn (:class:`UntrainedTableWarning`, once per process and spec) when the agent acts, outside
        training, with a table never trained nor loaded."""
        if self.learning or self._has_model:
            return
        key = json.dumps(self.spec(), sort_keys=True, default=str)
        with _WARNED_LOCK:
            if key in _WARNED:
                return
            _WARNED.add(key)
        warnings.warn(f"{self.name}: simulated with its initial Q table (never trained nor loaded: every action "
                      f"valued {self.params['initial_value']:g}, so the greedy choice is the menu by tie, with "
                      f"epsilon {self.params['epsilon']:g} exploration); train it first, or give "
                      "model_path= a saved table", UntrainedTableWarning, stacklevel=3)

    def state(self, obs: np.ndarray, info: dict[str, Any]) -> tuple[int, ...]:
        """Discrete state of the upcoming trial."""
        if self._index is None:
            names = list(self.context.obs_names) if self.context is not None else []
            if not names:
                raise NotReadyError(f"{self.name}: needs a context with obs_names (use agents.rollout.context_of(env))")
            self._index = [names.index(f) for f in _FEATURES]
        raw = np.expm1(np.asarray(obs, dtype=np.float64)[self._index])
        cells = tuple(int(np.searchsorted(_EDGES[f], v, side="right")) for f, v in zip(_FEATURES, raw))
        return (int(info["target"]), *cells)

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        if self.q is None:
            self.reset()
        q = self.q[self.state(obs, info)]  # type: ignore[index]
        eps = self.params["epsilon"]
        p = np.full(3, eps / 3)
        p[int(np.argmax(q))] += 1 - eps
        return p

    def _next_value(self, state: tuple[int, ...], action: int) -> float:
        """Value of ``state`` at the command's next use, where ``action`` was taken."""
        raise NotImplementedError

    def observe(self, transition: Transition) -> None:
        """TD update of the command's previous use, now that its next state is known."""
        if not self.learning:
            return
        c = int(transition.info["command"])
        s = self.state(transition.obs, {"target": c})
        previous = self._open.pop(c, None)
        if previous is not None:
            s0, a0, r0 = previous
            self._td(s0, a0, r0, self._next_value(s, int(transition.action)))
        self._open[c] = (s, int(transition.action), float(transition.reward))
        if transition.terminated:  # the schedule's end: a true end, nothing to bootstrap from
            for s0, a0, r0 in self._open.values():
                self._td(s0, a0, r0, 0.0)
            self._open.clear()
        elif transition.truncated:  # cut short by a wrapper: the open uses have no next state to learn from
            self._open.clear()

    def _td(self, s: tuple[int, ...], a: int, r: float, next_value: float) -> None:
        q = self.q[s]  # type: ignore[index]
        q[a] += self.params["learning_rate"] * (r + self.params["discount"] * next_value - q[a])

    def train(self, env: Any, episodes: int, seed: int = 0, progress_bar: bool = True) -> pd.DataFrame:
        """Learn for ``episodes`` simulated users (seeds seed, seed+1, ...); returns total time per episode."""
        from shortcut_gym.agents.rollout import bind_for_world

        world = env.unwrapped.world
        bind_for_world(self, world, where=f"{self.name} train")  # checks a trained table's world too
        self.learning = True
        totals = []
        try:
            for i in tqdm(range(episodes), desc=f"train {self.name}", disable=not progress_bar):
                df = run_episode(env, self, seed=seed + i)
                totals.append(df["duration_s"].sum())
        finally:
            self.learning = False
        self._has_model = True
        self.trained_on(world)
        return pd.DataFrame({"episode": np.arange(episodes), "total_time_s": totals})

    def save(self, path: str | Path) -> Path:
        """Write the Q table, the agent name and the world record (JSON) to ``path`` (.npz; added when
        ``path`` has no suffix, another suffix refused: :func:`model_file_path`), atomically; returns
        the path written."""
        if self.q is None:
            raise NotReadyError(f"{self.name}: nothing to save, train first")
        p = model_file_path(self.name, path, ".npz")
        record = self.record_to_save(self.context.world if self.context is not None else None)
        with atomic_path(p) as tmp, open(tmp, "wb") as f:
            np.savez(f, q=self.q, name=self.name, world=json.dumps(record, sort_keys=True))
        self.model_path = str(p)
        return p

    def load(self, path: str | Path) -> TabularAgent:
        """Read a Q table written by :meth:`save` (shape must fit the bound context): the file ``path``,
        or ``path`` with .npz added where that file is the one (as :meth:`save` names it)."""
        p = Path(path)
        if not p.is_file() and not p.suffix:
            p = model_file_path(self.name, p, ".npz")
        if not p.is_file():
            raise ConfigError(f"{self.name}: no Q table at {p}")
        held = file_contents(p)
        if held.kind != "table" or held.name != self.name:
            raise DataError(f"{self.name}: {p} holds {held.description}, not a {self.name} Q table"
                            f"{hint_for(held, p)}")
        try:
            with np.load(p, allow_pickle=False) as d:
                q = d["q"]
                text = str(d["world"]) if "world" in d.files else None
        except (OSError, ValueError, KeyError) as err:
            raise DataError(f"{self.name}: {p} is not a Q table written by save ({err})") from None
        if q.ndim != 2 + len(_SIZES) or q.shape[1:] != (*_SIZES, 3):
            raise DataError(f"{self.name}: {p} holds a table of shape {q.shape}, not commands x {(*_SIZES, 3)}")
        if self.context is not None and q.shape[0] != self.context.n_commands:
            raise DataError(f"{self.name}: {p} has {q.shape[0]} commands, the context {self.context.n_commands}")
        record = None if text is None else parse_record(text, f"{self.name}: {p}")
        self.adopt_record(record, str(p), self.context.world if self.context is not None else None)
        self.q = q.copy()
        self.model_path = str(p)
        self._has_model = True
        return self

    def evaluate(self, env: Any, seeds: Any, greedy: bool = False) -> pd.DataFrame:
        """Total time (s) and hotkey share per simulated user, learning switched off; ``greedy``
        takes the best action of the table every time (epsilon 0 for the evaluation only)."""
        epsilon = self.params["epsilon"]
        if greedy:
            self.params["epsilon"] = 0.0
        try:
            return evaluate_agent(env, self, seeds)
        finally:
            self.params["epsilon"] = epsilon

    def spec(self) -> dict[str, Any]:
        out: dict[str, Any] = {"name": self.name, "params": dict(self.params)}
        if self.model_path is not None:
            out["model_path"] = self.model_path
        if self.allow_other_world:
            out["allow_other_world"] = True
        return out

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> FrozenBatchPolicy:
        """Compiled epsilon-greedy policy of the current table for ``n_users`` users (learning off);
        user i draws what ``reset(seeds[i])`` draws."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        if self.learning:
            raise ConfigError(f"{self.name}: a batch policy acts with a frozen table; switch learning off "
                              "(it is on only inside train)")
        if self.q is None:
            self.clear()
        names = list(self.context.obs_names) if self.context is not None else []
        if not names:
            raise NotReadyError(f"{self.name}: needs a context with obs_names (use agents.rollout.context_of(env))")
        self.warn_if_initial()
        q = self.q.reshape(-1, 3)  # type: ignore[union-attr]
        eps = self.params["epsilon"]
        p = np.full(q.shape, eps / 3)
        p[np.arange(len(q)), np.argmax(q, axis=1)] += 1 - eps
        rule = cell_rule(cdf_of(p).reshape(self.q.shape), [_EDGES[f] for f in _FEATURES])  # type: ignore[union-attr]
        return frozen_policy(self, n_users, seeds, lambda uses, sessions: rule, [names.index(f) for f in _FEATURES])


class QLearningAgent(TabularAgent):
    """Off-policy TD control: target r + gamma max_a' Q(s', a'), s' the command's next use."""

    name = "q_learning"

    def _next_value(self, state: tuple[int, ...], action: int) -> float:
        return float(np.max(self.q[state]))  # type: ignore[index]


class SarsaAgent(TabularAgent):
    """On-policy TD control: target r + gamma Q(s', a'), a' the action taken at the command's next use."""

    name = "sarsa"

    def _next_value(self, state: tuple[int, ...], action: int) -> float:
        return float(self.q[state][action])  # type: ignore[index]
