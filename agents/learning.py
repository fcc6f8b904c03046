"""Trial-by-trial learning models composed from switchable mechanisms (see :mod:`.mechanisms`).

One class, :class:`LearningAgent`, configured by a list of mechanism names; registered under
generic names whose only difference is the default list:

* ``rescorla_wagner``: value + memory_aware + planning + incidental + forgetting + perseveration + lapse
* ``choice_kernel``: choice_kernel + perseveration + lapse
* ``rw_choice_kernel``: every mechanism

``mechanisms=[...]`` replaces the default list, ``without=[...]`` removes names from it; a removed
mechanism's parameters disappear from ``param_specs()``. No default reproduces a published model.

Every rule runs in numba functions over state arrays with a leading user axis, shared by three
paths that therefore give the same probabilities: the single agent (``act`` /
``action_probabilities`` / ``observe``, a batch of one), :meth:`LearningAgent.batch_policy`
(many simulated users at once) and :meth:`LearningAgent.likelihood_function` (a compiled
log-likelihood over a logged trial table).

What the agent reads, so that a log can be replayed: before a trial ``info['target']``,
``info['next_trial']`` and, for the ``forgetting`` mechanism only, the observation feature
``log1p_seconds_since_last_use`` (time since the target's last use; from a log it is recomputed
from ``onset_s`` and rounded through float32 exactly as the environment stores it); after a trial
``command``, ``action``, ``outcome`` and ``duration_s``. The planning horizon in trials is the
bound context's ``horizon`` (for a log without a bound context, the log's number of trials).

Action sampling: one uniform u from the agent's generator per trial, action = the first a with
u < P(0) + ... + P(a); a batch user with seed s draws the same uniforms as a single agent reset
with seed s.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
import pandas as pd
from numba import njit

from shortcut_gym.agents import mechanisms as mech
from shortcut_gym.agents.base import N_ACTIONS, Agent, AgentContext, ParamSpec, Transition, agent_rng
from shortcut_gym.envs.kernel import ACTION_NAMES, HOTKEY, LEARN, OUT_HOTKEY, OUTCOME_NAMES
from shortcut_gym.envs.observation import feature_index

_DT_FEATURE = "log1p_seconds_since_last_use"


# ---- compiled rules ---------------------------------------------------------------------------
def _rule_jit_options() -> dict[str, bool]:
    """Compilation options of the per-trial rules.

    They allocate nothing and return no array, so they run without numba's reference-counting
    runtime (``_nrt=False``): with it, every call increfs/decrefs each of its array arguments
    (atomic operations the refcount pruning cannot remove across the mechanism branches, numba
    issue #2350), ~150 ns of the ~240 ns per trial. Same code and results. ``_nrt`` is a private
    numba option: if a numba version no longer knows it, the rules compile with the runtime on.
    """
    try:
        from numba.core.cpu import CPUTargetOptions
    except ImportError:
        return {"cache": True}
    return {"cache": True, "_nrt": False} if hasattr(CPUTargetOptions, "_nrt") else {"cache": True}


_RULE_JIT = _rule_jit_options()


@njit(**_RULE_JIT)
def _belief_now(b, c, dt_s, par, flags, belief):
    """User ``b``'s recall belief for command ``c`` after ``dt_s`` seconds since its last use
    (decayed when ``forgetting`` is on); the same value for the decision and the update."""
    p = belief[b, c]
    if flags[mech.M_FORGETTING] == 1:
        p *= math.exp(-par[mech.P_FORGET] * dt_s / 3600.0)
    return p


@njit(**_RULE_JIT)
def _decide(b, c, p, trial, horizon, par, flags, q, ck, last_a, count, tk, seen, out):
    """Write P(menu, hotkey, learn) of user ``b`` for target ``c`` into ``out``; ``p`` is
    :func:`_belief_now` (unused without ``memory_aware``)."""
    n_cmd = q.shape[1]
    logit0 = 0.0
    logit1 = 0.0
    logit2 = 0.0
    if flags[mech.M_VALUE] == 1:
        t_menu = -q[b, c, 0]
        t_hk = -q[b, c, 1]
        t_learn = -q[b, c, 2]
        if flags[mech.M_MEMORY_AWARE] == 1:
            t_ok = tk[b, 0]
            t_fail = tk[b, 1]
            t_hk = p * t_ok + (1.0 - p) * t_fail
            if flags[mech.M_PLANNING] == 1:
                left = max(horizon - trial - 1, 0)
                freq = (count[b, c] + 1.0) / (seen[b] + n_cmd)
                uses = min(par[mech.P_HORIZON_USES], freq * left)
                now_best = min(t_menu, t_hk)
                p_l = p + par[mech.P_RECALL_RATE] * (1.0 - p)
                after_learn = min(t_menu, p_l * t_ok + (1.0 - p_l) * t_fail)
                gain_learn = uses * max(0.0, now_best - after_learn)
                rate = par[mech.P_RECALL_RATE]
                p_up = p + rate * (1.0 - p)
                p_down = p - rate * p
                after_hk = (p * min(t_menu, p_up * t_ok + (1.0 - p_up) * t_fail)
                            + (1.0 - p) * min(t_menu, p_down * t_ok + (1.0 - p_down) * t_fail))
                gain_hk = uses * max(0.0, now_best - after_hk)
                gain_menu = 0.0
                if flags[mech.M_INCIDENTAL] == 1:
                    p_m = p + par[mech.P_INCIDENTAL] * (1.0 - p)
                    after_menu = min(t_menu, p_m * t_ok + (1.0 - p_m) * t_fail)
                    gain_menu = uses * max(0.0, now_best - after_menu)
                t_learn -= gain_learn
                t_hk -= gain_hk
                t_menu -= gain_menu
        beta = par[mech.P_BETA]
        logit0 = -beta * t_menu
        logit1 = -beta * t_hk
        logit2 = -beta * t_learn
    if flags[mech.M_CHOICE_KERNEL] == 1:
        w = par[mech.P_BETA_CK]
        logit0 += w * ck[b, 0]
        logit1 += w * ck[b, 1]
        logit2 += w * ck[b, 2]
    if flags[mech.M_PERSEVERATION] == 1:
        last = last_a[b, c]
        if last == 0:
            logit0 += par[mech.P_STICK]
        elif last == 1:
            logit1 += par[mech.P_STICK]
        elif last == 2:
            logit2 += par[mech.P_STICK]
    top = max(logit0, max(logit1, logit2))
    # exp(0) is exactly 1: the largest logit's term needs no exp call (same numbers, one call fewer)
    e0 = 1.0 if logit0 == top else math.exp(logit0 - top)
    e1 = 1.0 if logit1 == top else math.exp(logit1 - top)
    e2 = 1.0 if logit2 == top else math.exp(logit2 - top)
    z = e0 + e1 + e2
    lapse = par[mech.P_LAPSE] if flags[mech.M_LAPSE] == 1 else 0.0
    out[0] = (1.0 - lapse) * e0 / z + lapse / 3.0
    out[1] = (1.0 - lapse) * e1 / z + lapse / 3.0
    out[2] = (1.0 - lapse) * e2 / z + lapse / 3.0


@njit(**_RULE_JIT)
def _update(b, c, a, outcome, dur_s, p, par, flags, q, ck, last_a, belief, count, tk, seen):
    """Learn from user ``b``'s finished trial: command c, action a, outcome code, duration (s);
    ``p`` is :func:`_belief_now` before the trial."""
    alpha = par[mech.P_ALPHA]
    if flags[mech.M_VALUE] == 1:
        q[b, c, a] += alpha * (-dur_s - q[b, c, a])
    if flags[mech.M_MEMORY_AWARE] == 1:
        rate = par[mech.P_RECALL_RATE]
        if a == LEARN:
            p += rate * (1.0 - p)
        elif a == HOTKEY:
            if outcome == OUT_HOTKEY:
                p += rate * (1.0 - p)
                tk[b, 0] += alpha * (dur_s - tk[b, 0])
            else:
                p -= rate * p
                tk[b, 1] += alpha * (dur_s - tk[b, 1])
        elif flags[mech.M_INCIDENTAL] == 1:
            p += par[mech.P_INCIDENTAL] * (1.0 - p)
        belief[b, c] = p
    if flags[mech.M_CHOICE_KERNEL] == 1:
        r = par[mech.P_ALPHA_CK]
        for k in range(3):
            target = 1.0 if k == a else 0.0
            ck[b, k] += r * (target - ck[b, k])
    last_a[b, c] = a
    count[b, c] += 1.0
    seen[b] += 1


@njit(cache=True)
def _init_state(par, q, ck, last_a, belief, count, tk, seen):
    q[:] = -par[mech.P_PRIOR_TIME]
    ck[:] = 0.0
    last_a[:] = -1
    belief[:] = 0.0
    count[:] = 0.0
    tk[:, 0] = par[mech.P_PRIOR_HOTKEY]
    tk[:, 1] = par[mech.P_PRIOR_FAILURE]
    seen[:] = 0


@njit(cache=True)
def log_likelihood_kernel(command, action, outcome, duration_s, dt_s, trial, horizon, n_cmd, par, flags):
    """Sum over trials of ln P(logged action), replaying the logged outcomes (compiled)."""
    q = np.empty((1, n_cmd, 3))
    ck = np.empty((1, 3))
    last_a = np.empty((1, n_cmd), dtype=np.int64)
    belief = np.empty((1, n_cmd))
    count = np.empty((1, n_cmd))
    tk = np.empty((1, 2))
    seen = np.empty(1, dtype=np.int64)
    _init_state(par, q, ck, last_a, belief, count, tk, seen)
    out = np.empty(3)
    total = 0.0
    for t in range(command.shape[0]):
        c = command[t]
        p = _belief_now(0, c, dt_s[t], par, flags, belief)
        _decide(0, c, p, trial[t], horizon, par, flags, q, ck, last_a, count, tk, seen, out)
        total += math.log(max(out[action[t]], 1e-300))
        _update(0, c, action[t], outcome[t], duration_s[t], p, par, flags, q, ck, last_a, belief, count, tk, seen)
    return total


@njit(cache=True)
def batch_decide(targets, dt_s, trial, horizon, par, flags, q, ck, last_a, belief, count, tk, seen,
                 uniforms, probs, actions, beliefs_now):
    """Probabilities (B, 3) and sampled actions (B,) of every user for its target; writes each
    user's :func:`_belief_now` into ``beliefs_now`` (B,) for :func:`batch_update`."""
    for b in range(targets.shape[0]):
        p = _belief_now(b, targets[b], dt_s[b], par, flags, belief)
        beliefs_now[b] = p
        _decide(b, targets[b], p, trial, horizon, par, flags, q, ck, last_a, count, tk, seen, probs[b])
        u = uniforms[b]
        if u < probs[b, 0]:
            actions[b] = 0
        elif u < probs[b, 0] + probs[b, 1]:
            actions[b] = 1
        else:
            actions[b] = 2


@njit(cache=True)
def batch_update(targets, actions, outcomes, durations_s, beliefs_now, par, flags, q, ck, last_a, belief, count,
                 tk, seen):
    """Learn from every user's finished trial (``beliefs_now`` as written by :func:`batch_decide`)."""
    for b in range(targets.shape[0]):
        _update(b, targets[b], actions[b], outcomes[b], durations_s[b], beliefs_now[b], par, flags, q, ck, last_a,
                belief, count, tk, seen)


def sample_action(p: np.ndarray, u: float) -> int:
    """First action a with u < P(0) + ... + P(a) (the same rule as :func:`batch_decide`)."""
    if u < p[0]:
        return 0
    if u < p[0] + p[1]:
        return 1
    return 2


# ---- observation and log helpers ----------------------------------------------------------------
def dt_feature_index(context: AgentContext | None, obs_dim: int) -> int:
    """Index of ``log1p_seconds_since_last_use`` in an observation of length ``obs_dim``: from
    ``context.obs_names`` when given, else from the one layout of that length
    (:func:`shortcut_gym.envs.observation.feature_index`)."""
    if context is None:
        raise ValueError("the forgetting mechanism needs a bound context (call agent.bind(context) first)")
    return feature_index(_DT_FEATURE, obs_dim, context.n_commands, context.obs_names)


def decode_dt_s(feature: np.ndarray | float) -> np.ndarray | float:
    """Seconds since last use from the observation's float32 log1p feature."""
    return np.expm1(np.asarray(feature, dtype=np.float64))


@dataclass(frozen=True)
class TrialArrays:
    """One participant's logged trials as the compiled likelihood's arrays (trial order)."""

    command: np.ndarray  # int64
    action: np.ndarray  # int64 codes (ACTION_NAMES)
    outcome: np.ndarray  # int64 codes (OUTCOME_NAMES)
    duration_s: np.ndarray
    onset_s: np.ndarray
    trial: np.ndarray  # int64
    dt_s: np.ndarray  # seconds since the command's last use, rounded as the env's float32 obs
    n_commands: int

    @property
    def n_trials(self) -> int:
        """Number of trials."""
        return int(self.command.shape[0])

    @classmethod
    def from_frame(cls, df: pd.DataFrame, n_commands: int | None = None) -> TrialArrays:
        """Build from a one-participant table (trial, session, onset_s, command, action, outcome,
        duration_s); errors name the column and row at fault."""
        need = ["trial", "session", "onset_s", "command", "action", "outcome", "duration_s"]
        missing = [c for c in need if c not in df.columns]
        if missing:
            raise ValueError(f"trial table lacks column(s) {missing}; has {list(df.columns)}")
        if len(df) == 0:
            raise ValueError("trial table has no rows")
        d = df.sort_values("trial", kind="stable")
        codes = {}
        for col, names in (("action", ACTION_NAMES), ("outcome", OUTCOME_NAMES)):
            values = d[col].to_numpy()
            if values.dtype.kind in "iu":
                arr = values.astype(np.int64)
                bad = (arr < 0) | (arr >= len(names))
            else:
                lookup = {n: i for i, n in enumerate(names)}
                arr = np.array([lookup.get(str(v), -1) for v in values], dtype=np.int64)
                bad = arr < 0
            if bad.any():
                i = int(np.argmax(bad))
                raise ValueError(f"trial table row {d.index[i]}: column {col!r} value {values[i]!r} is not one of "
                                 f"{list(names)}")
            codes[col] = arr
        command = d["command"].to_numpy()
        if command.dtype.kind not in "iu":
            raise ValueError(f"column 'command' must hold integer command indices, got dtype {command.dtype}")
        command = command.astype(np.int64)
        n_cmd = int(command.max()) + 1 if n_commands is None else int(n_commands)
        if command.min() < 0 or command.max() >= n_cmd:
            i = int(np.argmax((command < 0) | (command >= n_cmd)))
            raise ValueError(f"trial table row {d.index[i]}: command {command[i]} is outside 0..{n_cmd - 1}")
        onset = d["onset_s"].to_numpy(dtype=np.float64)
        dur = d["duration_s"].to_numpy(dtype=np.float64)
        if not np.all(np.isfinite(dur)) or np.any(dur < 0):
            i = int(np.argmax(~np.isfinite(dur) | (dur < 0)))
            raise ValueError(f"trial table row {d.index[i]}: duration_s {dur[i]!r} must be a finite number >= 0")
        dt = np.zeros(len(d))
        last: dict[int, float] = {}
        for i, (c, t) in enumerate(zip(command.tolist(), onset.tolist())):
            if c in last:
                raw = max(t - last[c], 0.0)
                dt[i] = float(np.expm1(np.float64(np.float32(math.log1p(raw)))))
            last[c] = t
        return cls(command, codes["action"], codes["outcome"], dur, onset, d["trial"].to_numpy().astype(np.int64),
                   dt, n_cmd)


# ---- the agent ----------------------------------------------------------------------------------
class LearningAgent(Agent):
    """A learning model built from named mechanisms (see module and :mod:`.mechanisms` docs)."""

    name = "learning"
    default_mechanisms: ClassVar[tuple[str, ...]] = tuple(mech.MECHANISMS)

    def __init__(self, context: AgentContext | None = None, mechanisms: Iterable[str] | None = None,
                 without: Iterable[str] | None = None, options: dict[str, float] | None = None,
                 **params: float) -> None:
        self.mechanisms = mech.resolve_mechanisms(self.name, self.default_mechanisms, mechanisms, without)
        for p in params:
            owner = mech.owner_of(p)
            if owner is not None and owner not in self.mechanisms:
                raise ValueError(f"{self.name}: parameter {p!r} belongs to mechanism {owner!r}, which is switched "
                                 f"off (on: {list(self.mechanisms)})")
        opts = dict(mech.OPTION_DEFAULTS)
        for key, value in (options or {}).items():
            if key not in opts:
                raise ValueError(f"{self.name}: unknown option {key!r}; known: {sorted(opts)}")
            if not (isinstance(value, (int, float)) and value >= 0 and math.isfinite(value)):
                raise ValueError(f"{self.name}: option {key}={value!r} must be a number of seconds >= 0")
            opts[key] = float(value)
        self.options = opts
        super().__init__(context, **params)
        self._dt_index: int | None = None
        self._alloc()

    # -- specification
    def param_specs(self) -> dict[str, ParamSpec]:
        return {spec.name: spec for m in self.mechanisms for _, spec in mech.MECHANISMS[m].params}

    def param_slots(self) -> np.ndarray:
        """Position of each fitted parameter (in ``param_specs`` order) in the full kernel vector."""
        return np.array([slot for m in self.mechanisms for slot, _ in mech.MECHANISMS[m].params], dtype=np.int64)

    def flags(self) -> np.ndarray:
        """Mechanism switches of the compiled kernel."""
        f = np.zeros(mech.N_MECH, dtype=np.int64)
        for m in self.mechanisms:
            f[mech.MECHANISMS[m].flag] = 1
        return f

    def full_parameters(self, theta: np.ndarray | None = None) -> np.ndarray:
        """Kernel parameter vector: defaults, options, then ``theta`` (natural values) or ``params``."""
        par = np.zeros(mech.N_FULL_PAR)
        for m in mech.MECHANISMS.values():
            for slot, spec in m.params:
                par[slot] = spec.default
        for key, slot in mech.OPTION_SLOTS.items():
            par[slot] = self.options[key]
        values = np.array([self.params[n] for n in self.param_specs()]) if theta is None else np.asarray(theta, float)
        par[self.param_slots()] = values
        return par

    def spec(self) -> dict[str, Any]:
        return {"name": self.name, "mechanisms": list(self.mechanisms), "options": dict(self.options),
                "params": dict(self.params)}

    # -- single agent (a batch of one)
    def _alloc(self, n_users: int = 1) -> None:
        n = self.context.n_commands if self.context is not None else 0
        self._state = _new_state(n_users, n)
        self._par = self.full_parameters()
        self._flags = self.flags()
        if n:
            _init_state(self._par, *self._state)
        self._p = np.zeros(N_ACTIONS)
        self._last_decision: tuple[int, int, float] | None = None

    def bind(self, context: AgentContext) -> None:
        super().bind(context)
        self._dt_index = None
        self._alloc()

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        if self.context is None:
            raise ValueError(f"{self.name}: bind a context (command count, horizon) before reset")
        self._alloc()

    def _dt_from_obs(self, obs: np.ndarray | None) -> float:
        if self._flags[mech.M_FORGETTING] == 0:
            return 0.0
        if obs is None or np.ndim(obs) != 1 or len(obs) == 0:
            raise ValueError(f"{self.name}: the forgetting mechanism reads {_DT_FEATURE!r} from the observation; "
                             "none was given")
        if self._dt_index is None:
            self._dt_index = dt_feature_index(self.context, len(obs))
        return float(decode_dt_s(obs[self._dt_index]))

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        if self.context is None:
            raise ValueError(f"{self.name}: bind a context before use")
        c, trial = int(info["target"]), int(info["next_trial"])
        dt = self._dt_from_obs(obs)
        q, ck, last_a, belief, count, tk, seen = self._state
        p = _belief_now(0, c, dt, self._par, self._flags, belief)
        _decide(0, c, p, trial, self.context.horizon, self._par, self._flags, q, ck, last_a, count, tk, seen, self._p)
        self._last_decision = (c, trial, dt)
        return self._p.copy()

    def act(self, obs: np.ndarray, info: dict[str, Any]) -> int:
        p = self.action_probabilities(obs, info)
        return sample_action(p, float(self.rng.random()))

    def observe(self, transition: Transition) -> None:
        info = transition.info
        c, a = int(info["command"]), int(transition.action)
        outcome = OUTCOME_NAMES.index(info["outcome"]) if isinstance(info["outcome"], str) else int(info["outcome"])
        dt = self._dt_from_obs(transition.obs)
        p = _belief_now(0, c, dt, self._par, self._flags, self._state[3])
        _update(0, c, a, outcome, float(info["duration_s"]), p, self._par, self._flags, *self._state)

    def action_values(self, command: int) -> np.ndarray:
        """Current delta-rule values Q[command, (menu, hotkey, learn)] (-seconds) of the single agent."""
        return self._state[0][0, int(command)].copy()

    def recall_belief(self, command: int) -> float:
        """Current recall belief of ``command`` (before forgetting since its last use)."""
        return float(self._state[3][0, int(command)])

    # -- compiled paths
    def likelihood_function(self, trials: TrialArrays) -> Callable[[np.ndarray], float]:
        """Compiled log-likelihood of ``trials`` as a function of the natural parameter vector
        (order of ``param_specs()``); uses the bound context's horizon and command count when bound."""
        n_cmd = self.context.n_commands if self.context is not None else trials.n_commands
        if trials.command.max() >= n_cmd:
            raise ValueError(f"log names command {int(trials.command.max())}, the agent knows {n_cmd} commands")
        horizon = self.context.horizon if self.context is not None else trials.n_trials
        flags = self.flags()
        slots = self.param_slots()
        base = self.full_parameters()
        arrays = (trials.command, trials.action, trials.outcome, trials.duration_s, trials.dt_s, trials.trial)
        k = len(slots)

        def log_likelihood(theta: np.ndarray) -> float:
            theta = np.asarray(theta, dtype=np.float64)
            if theta.shape != (k,):
                raise ValueError(f"theta must have {k} entries {list(self.param_specs())}, got shape {theta.shape}")
            par = base.copy()
            par[slots] = theta
            return float(log_likelihood_kernel(*arrays, horizon, n_cmd, par, flags))

        return log_likelihood

    def log_likelihood(self, df: pd.DataFrame) -> float:
        """Log-likelihood of a one-participant trial table under the current parameters."""
        trials = TrialArrays.from_frame(df, self.context.n_commands if self.context is not None else None)
        return self.likelihood_function(trials)(np.array([self.params[n] for n in self.param_specs()]))

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> BatchLearningPolicy:
        """Compiled policy for ``n_users`` simulated users (user i seeded like ``reset(seeds[i])``)."""
        return BatchLearningPolicy(self, n_users, seeds)


def _new_state(n_users: int, n_cmd: int) -> tuple[np.ndarray, ...]:
    return (np.zeros((n_users, n_cmd, 3)), np.zeros((n_users, 3)), np.full((n_users, n_cmd), -1, dtype=np.int64),
            np.zeros((n_users, n_cmd)), np.zeros((n_users, n_cmd)), np.zeros((n_users, 2)),
            np.zeros(n_users, dtype=np.int64))


class BatchLearningPolicy:
    """Many users of one learning agent: ``actions(targets, obs)`` then ``observe(...)`` per trial.

    Pass ``obs`` (B, D) from :class:`~shortcut_gym.envs.simulator.BatchSimulator`; the forgetting
    mechanism reads the time since last use from it. ``probabilities`` holds the last (B, 3).
    """

    _BLOCK = 64

    def __init__(self, agent: LearningAgent, n_users: int, seeds: Sequence[int]) -> None:
        if agent.context is None:
            raise ValueError(f"{agent.name}: bind a context before batch_policy")
        if len(seeds) != n_users:
            raise ValueError(f"batch_policy: {len(seeds)} seeds for {n_users} users")
        self.agent = agent
        self.n_users = n_users
        self.par, self.flags = agent.full_parameters(), agent.flags()
        self.horizon = agent.context.horizon
        self.state = _new_state(n_users, agent.context.n_commands)
        _init_state(self.par, *self.state)
        self.seeds = [int(s) for s in seeds]
        self._gens: list[np.random.Generator] | None = None
        self._u = np.zeros((n_users, self._BLOCK))
        self._u_pos = self._BLOCK
        self.probabilities = np.zeros((n_users, N_ACTIONS))
        self._actions = np.zeros(n_users, dtype=np.int64)
        self._dt = np.zeros(n_users)
        self._beliefs_now = np.zeros(n_users)
        self.trial = 0
        self._dt_index: int | None = None

    @property
    def gens(self) -> list[np.random.Generator]:
        """Each user's generator (``agent_rng(seed)``), made on first use."""
        if self._gens is None:
            self._gens = [agent_rng(s) for s in self.seeds]
        return self._gens

    def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
        """Sampled action (B,) of every user for its target command."""
        targets = np.asarray(targets, dtype=np.int64)
        if self.flags[mech.M_FORGETTING] == 1:
            if self._dt_index is None:
                self._dt_index = dt_feature_index(self.agent.context, obs.shape[1])
            self._dt = decode_dt_s(obs[:, self._dt_index])
        if self._u_pos == self._BLOCK:
            self._u = np.stack([g.random(self._BLOCK) for g in self.gens])
            self._u_pos = 0
        u = np.ascontiguousarray(self._u[:, self._u_pos])
        self._u_pos += 1
        batch_decide(targets, self._dt, self.trial, self.horizon, self.par, self.flags, *self.state, u,
                     self.probabilities, self._actions, self._beliefs_now)
        return self._actions.copy()

    def observe(self, targets: np.ndarray, actions: np.ndarray, outcomes: np.ndarray, durations_s: np.ndarray) -> None:
        """Learn from the trial just run (outcome int codes, durations in seconds)."""
        batch_update(np.asarray(targets, dtype=np.int64), np.asarray(actions, dtype=np.int64),
                     np.asarray(outcomes, dtype=np.int64), np.asarray(durations_s, dtype=np.float64),
                     self._beliefs_now, self.par, self.flags, *self.state)
        self.trial += 1

    def run(self, sim: Any) -> Any:
        """Run a just-reset :class:`~shortcut_gym.envs.simulator.BatchSimulator` to its horizon in one
        compiled loop; per-user sums (:class:`~shortcut_gym.agents.learning_fused.FusedSums`) equal to
        stepping ``actions`` / ``sim.step`` / ``observe`` trial by trial."""
        from shortcut_gym.agents.learning_fused import simulate_fused

        return simulate_fused(self, sim)


class RescorlaWagnerAgent(LearningAgent):
    """Delta-rule action values per command with the memory, planning and choice mechanisms."""

    name = "rescorla_wagner"
    default_mechanisms = ("value", "memory_aware", "planning", "incidental", "forgetting", "perseveration", "lapse")


class ChoiceKernelAgent(LearningAgent):
    """Habit (choice kernel) with perseveration and lapse, no value learning."""

    name = "choice_kernel"
    default_mechanisms = ("choice_kernel", "perseveration", "lapse")


class RWChoiceKernelAgent(LearningAgent):
    """Delta-rule values and a choice kernel together, with every other mechanism."""

    name = "rw_choice_kernel"
    default_mechanisms = tuple(mech.MECHANISMS)
