"""Exact reference solver for small worlds: dynamic programming over the simulator's full state.

The state before a trial is everything the simulator keeps that can change a later duration or
recall: the trial index, the target, the hand position and, per command, every memory trace (time
and weight; the O(1) hybrid's lumped old part for kind "actr"), the menu-selection count (menu
expertise) and the use count. Each action is stepped by the simulator's own compiled kernel
(:func:`shortcut_gym.envs.kernel.step_user`) with the uniform draw placed in each outcome's interval
(recalled, wrong hotkey, forgotten), so durations, recall probabilities, traces and the hand follow
the simulator's rules by construction; the wrong and forgotten outcomes lead to the same state and
are merged by their probabilities. Targets are drawn i.i.d. from the usage probabilities, as
:func:`shortcut_gym.envs.task.sample_schedule` draws them.

:func:`exact_mdp` enumerates the reachable decision states stage by stage into an explicit
finite-horizon MDP (plus one absorbing end state) and solves it by backward induction (Bellman 1957;
Puterman 1994, ch. 4); :func:`evaluate_exactly` computes the expected time of an agent's policy over
the same tree. The state count grows about (3 x commands)^trials: meant for a few commands and about
ten trials.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import sparse

from shortcut_gym.agents.base import Agent, Transition
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.info import upcoming_info
from shortcut_gym.envs.task import session_onsets
from shortcut_gym.envs.world import World

#: Refuse worlds whose reachable decision states exceed this (the tree grows exponentially).
MAX_STATES = 400_000
_RELEVANT_FS = [k.F_OLD_W, k.F_OLD_FIRST, k.F_OLD_LAST, k.F_EXP_S, k.F_EXP_T]
_RELEVANT_IS = [k.S_NTR, k.S_MENU_SEL, k.S_EXPOSURE]


class _Kernel:
    """One simulated user's state arrays and the world's kernel constants."""

    def __init__(self, world: World) -> None:
        self.par, self.ipar = world.parameters()
        self.cmdc = world.command_constants()
        self.n_cmd = world.commands.n_commands
        self.horizon = world.horizon
        if int(self.ipar[k.I_WARMUP]) != 0:
            raise ConfigError("exact solver: the warm-up aid is not supported (it lays traces inside a trial's step)")
        onset, session, gap_total = session_onsets(world.schedule)
        self.onset = onset[None, :].copy()
        self.session = session[None, :].astype(np.int64)
        self.clock = (onset - (1.0 - world.memory.gap_time_scale) * gap_total)[None, :].copy()
        self.capacity = max(self.horizon, int(world.memory.recent_traces)) + 1
        self.comm = float(world.costs.errors.commission_share)
        self.fail_lat = float(k.failed_retrieval_s(self.par))
        self.p_use = np.asarray(world.commands.probability, dtype=float)
        self._cmd = np.zeros((1, self.horizon), dtype=np.int64)  # the kernel reads only entry t
        self._u = np.zeros((1, self.horizon))
        self._ops = np.zeros(k.N_OPS)
        # trial-time noise (costs.noise) has mean 1 and does not depend on the decisions: expected
        # times are those without it
        self._noise = np.ones((1, self.horizon))

    def fresh(self) -> tuple[np.ndarray, ...]:
        """The arrays of a user before the first trial (hand on the mouse)."""
        fs = np.zeros((1, self.n_cmd, k.N_FS))
        ist = np.zeros((1, self.n_cmd, k.N_IS), dtype=np.int64)
        tr = np.zeros((1, self.n_cmd, self.capacity, 3))
        us = np.zeros((1, k.N_US), dtype=np.int64)
        us[0, k.U_HAND] = k.HAND_MOUSE
        return fs, ist, tr, us

    def key(self, state: tuple[np.ndarray, ...]) -> bytes:
        """The state's identity: the fields that change a later step (not the outcome counters)."""
        fs, ist, tr, us = state
        parts = [us[0, :].tobytes(), fs[0][:, _RELEVANT_FS].tobytes(), ist[0][:, _RELEVANT_IS].tobytes()]
        for c in range(self.n_cmd):
            parts.append(tr[0, c, : ist[0, c, k.S_NTR]].tobytes())
        return b"|".join(parts)

    def recall(self, state: tuple[np.ndarray, ...], c: int, t: int) -> float:
        """Recall probability of command ``c``'s hotkey at trial ``t``."""
        fs, ist, tr, _ = state
        a = k.activation(self.ipar, self.par, fs[0, c], ist[0, c], tr[0, c], self.clock[0, t])
        return float(k.recall_p(self.par, a))

    def outcomes(self, state: tuple[np.ndarray, ...], c: int, t: int,
                 action: int) -> list[tuple[float, float, int, tuple]]:
        """(probability, expected seconds, outcome code, next state) of each distinct next state of
        ``action`` on command ``c`` at trial ``t`` (stepped by the simulator's kernel)."""
        draws: list[tuple[float, list[tuple[float, float]], int]]
        if action != k.HOTKEY:
            draws = [(1.0, [(1.0, 0.0)], k.OUT_MENU if action == k.MENU else k.OUT_LEARNED)]
        else:
            p = self.recall(state, c, t)
            fail = [(self.comm, p + 0.5 * (1.0 - p) * self.comm),  # (share of failures, u in the interval)
                    (1.0 - self.comm, p + (1.0 - p) * (self.comm + 0.5 * (1.0 - self.comm)))]
            draws = [(p, [(1.0, 0.0)], k.OUT_HOTKEY), (1.0 - p, [f for f in fail if f[0] > 0], k.OUT_FORGOTTEN)]
        out = []
        for prob, us_of, code in draws:
            if prob <= 0.0:
                continue
            mean_s = 0.0
            nxt: tuple | None = None
            for share, u in us_of:
                dur, new = self._step(state, c, t, action, u)
                mean_s += share * dur
                nxt = new
            assert nxt is not None
            out.append((prob, mean_s, code, nxt))
        return out

    def _step(self, state: tuple[np.ndarray, ...], c: int, t: int, action: int, u: float) -> tuple[float, tuple]:
        fs, ist, tr, us = state[0].copy(), state[1].copy(), state[2].copy(), state[3].copy()
        self._cmd[0, t] = c
        self._u[0, t] = u
        us[0, k.U_TRIAL] = t
        dur, _, _ = k.step_user(0, action, self.ipar, self.par, self.cmdc, fs, ist, tr, us, self._cmd, self.clock,
                                self.onset, self._u, self.session, self._ops, False, self.fail_lat, self._noise)
        return float(dur), (fs, ist, tr, us)


@dataclass
class ExactMDP:
    """The explicit finite-horizon MDP of a small world (decision states, then one end state).

    ``P[a]`` (S x S, scipy CSR) and ``R`` (S x actions, minus expected seconds); ``stage[s]`` the trial
    of state s (the horizon for the end state), ``start`` the probability of each first-trial state;
    ``V`` (S,) and ``policy`` (S,) the optimum by backward induction; ``value_s`` the optimal expected
    seconds per user.
    """

    P: list[sparse.csr_matrix]
    R: np.ndarray
    stage: np.ndarray
    start: np.ndarray
    V: np.ndarray
    policy: np.ndarray

    @property
    def value_s(self) -> float:
        """Optimal expected seconds per simulated user."""
        return -float(self.start @ self.V)

    @property
    def n_states(self) -> int:
        """Decision states plus the end state."""
        return len(self.stage)


def exact_mdp(world: World, max_states: int = MAX_STATES) -> ExactMDP:
    """Enumerate and solve the world's exact MDP (see the module docstring)."""
    kern = _Kernel(world)
    H, n_cmd = kern.horizon, kern.n_cmd
    ids: dict[tuple[int, int, bytes], int] = {}
    states: list[tuple[int, int, tuple]] = []

    def state_id(t: int, c: int, st: tuple) -> int:
        key = (t, c, kern.key(st))
        if key not in ids:
            if len(states) >= max_states:
                raise ConfigError(f"exact solver: more than {max_states:,} states; use fewer commands or trials")
            ids[key] = len(states)
            states.append((t, c, st))
        return ids[key]

    first = kern.fresh()
    start_pairs = [(state_id(0, c, first), float(kern.p_use[c])) for c in range(n_cmd) if kern.p_use[c] > 0]
    rows: list[list[tuple[int, int, float]]] = [[], [], []]
    rewards: list[tuple[int, int, float]] = []
    s = 0
    while s < len(states):
        t, c, st = states[s]
        for a in (k.MENU, k.HOTKEY, k.LEARN):
            expected = 0.0
            for prob, mean_s, _, nxt in kern.outcomes(st, c, t, a):
                expected += prob * mean_s
                if t + 1 < H:
                    for c2 in range(n_cmd):
                        if kern.p_use[c2] > 0:
                            rows[a].append((s, state_id(t + 1, c2, nxt), prob * float(kern.p_use[c2])))
                else:
                    rows[a].append((s, -1, prob))
            rewards.append((s, a, -expected))
        s += 1
    n = len(states) + 1
    end = n - 1
    P = []
    for a in range(3):
        r = [i for i, _, _ in rows[a]] + [end]
        col = [j if j >= 0 else end for _, j, _ in rows[a]] + [end]
        val = [v for _, _, v in rows[a]] + [1.0]
        m = sparse.csr_matrix((val, (r, col)), shape=(n, n))
        m.sum_duplicates()
        P.append(clean_csr(m))
    R = np.zeros((n, 3))
    for i, a, v in rewards:
        R[i, a] = v
    stage = np.array([t for t, _, _ in states] + [H], dtype=np.int64)
    start = np.zeros(n)
    for i, w in start_pairs:
        start[i] += w
    V, policy = backward_by_stage(P, R, stage, H)
    return ExactMDP(P, R, stage, start, V, policy)


def clean_csr(m: sparse.csr_matrix) -> sparse.csr_matrix:
    """Rows of a sparse transition matrix clipped at 0 and renormalised to sum to 1."""
    m.data = np.clip(m.data, 0.0, None)
    sums = np.asarray(m.sum(axis=1)).ravel()
    return sparse.csr_matrix(sparse.diags(1.0 / sums) @ m)


def backward_by_stage(P: list[sparse.csr_matrix], R: np.ndarray, stage: np.ndarray,
                      horizon: int) -> tuple[np.ndarray, np.ndarray]:
    """Optimal V and action of every state, latest stage first (every transition goes one stage
    on; ties to the lowest action index)."""
    V = np.zeros(len(stage))
    policy = np.full(len(stage), -1, dtype=np.int64)
    for t in range(horizon - 1, -1, -1):
        rows = np.flatnonzero(stage == t)
        Q = np.stack([R[rows, a] + P[a][rows] @ V for a in range(3)], axis=1)
        policy[rows] = np.argmax(Q, axis=1)
        V[rows] = Q[np.arange(len(rows)), policy[rows]]
    return V, policy


def evaluate_exactly(world: World, agent: Agent, max_states: int = MAX_STATES) -> float:
    """Expected seconds per simulated user of ``agent``'s policy, exactly, over the same tree.

    For deterministic agents that decide from the target, the trial index and the outcomes they
    observe (the planner, the fixed rules): ``act`` gets the upcoming trial's info
    (:func:`~shortcut_gym.envs.info.upcoming_info`) and a zero observation, ``observe`` a transition
    whose info has "command", "trial" and "outcome" only: the next target is not drawn yet in the
    tree, so there is no full step info to give (a wrong hotkey is reported as forgotten: both lead
    to the same state). Memoised by the simulator state, so the agent's decision must be a function
    of it (true of both).
    """
    from shortcut_gym.agents.rollout import bind_for_world
    from shortcut_gym.envs.kernel import OUTCOME_NAMES

    kern = _Kernel(world)
    names = world.commands.names
    bind_for_world(agent, world, where="evaluate_exactly")
    agent.reset(0)
    obs = np.zeros(len(world.observation_names()), dtype=np.float32)
    memo: dict[tuple[int, bytes], float] = {}

    def value(t: int, st: tuple, ag: Agent) -> float:
        if t == kern.horizon:
            return 0.0
        key = (t, kern.key(st))
        if key in memo:
            return memo[key]
        if len(memo) >= max_states:
            raise ConfigError(f"exact evaluation: more than {max_states:,} states")
        total = 0.0
        for c in range(kern.n_cmd):
            pc = float(kern.p_use[c])
            if pc <= 0:
                continue
            info = upcoming_info(c, names[c], t, float(kern.onset[0, t]), int(kern.session[0, t]))
            a = int(ag.act(obs, info))  # type: ignore[arg-type]
            for prob, mean_s, code, nxt in kern.outcomes(st, c, t, a):
                child = copy.deepcopy(ag)
                child.observe(Transition(obs, a, -mean_s, obs, {"command": c, "trial": t,  # type: ignore[arg-type]
                                                                 "outcome": OUTCOME_NAMES[code]}, False,
                                         t + 1 == kern.horizon))
                total += pc * prob * (mean_s + value(t + 1, nxt, child))
        memo[key] = total
        return total

    return value(0, kern.fresh(), agent)


def small_world(n_commands: int = 1, sessions: int = 2, trials_per_session: int = 4, threshold: float = -3.5,
                gap_h: float = 24.0, keystroke_s: float = 0.2, encoding_s: float = 1.0,
                memory_kind: str = "actr") -> World:
    """A world of the small-world family the planner's optimality gap is reported on: an invented
    one-menu tool of ``n_commands`` commands (Zipf usage, exponent 1), otherwise the default costs
    and memory with the given retrieval threshold, keystroke time K (s), encoding time of a learn
    trial (s), memory kind and schedule."""
    from shortcut_gym.envs.world import make_world

    names = ["Save log", "Open log", "Mark pool", "Tag find"]
    hotkeys = ["Ctrl+S", "Ctrl+O", "Ctrl+M", "Ctrl+Shift+T"]
    if not 1 <= n_commands <= len(names):
        raise ConfigError(f"small_world: n_commands must be 1..{len(names)}, got {n_commands}")
    scenario = {"name": "small_tool", "description": "an invented one-menu tool", "zipf_exponent": 1.0,
                "menus": [{"title": "Log", "items": [{"name": n, "hotkey": h}
                                                     for n, h in zip(names[:n_commands], hotkeys[:n_commands])]}],
                "schedule": {"sessions": sessions, "trials_per_session": trials_per_session, "trial_interval_s": 45,
                             "gap_h": gap_h}}
    return make_world(scenario=scenario, costs={"klm": {"keystroke_s": keystroke_s},
                                                "learn": {"encoding_s": encoding_s}},
                      memory={"kind": memory_kind, "threshold": threshold})


#: The documented family (label, small_world keyword arguments): one command over 2 sessions of 4
#: trials and two commands over 2 sessions of 3, across retrieval thresholds, gaps, typing speed,
#: learning cost and memory kind.
SMALL_WORLDS: tuple[tuple[str, dict[str, Any]], ...] = tuple(
    (f"{n}cmd tau{tau:+.1f} gap{gap:g}h K{ks:g} enc{enc:g}{' ' + kind if kind != 'actr' else ''}",
     {"n_commands": n, "trials_per_session": 4 if n == 1 else 3, "threshold": tau, "gap_h": gap,
      "keystroke_s": ks, "encoding_s": enc, "memory_kind": kind})
    for n, tau, gap, ks, enc, kind in [
        (1, -3.5, 24, 0.2, 1.0, "actr"), (1, -3.5, 24, 0.2, 4.0, "actr"), (1, -2.0, 1, 0.08, 0.5, "actr"),
        (1, -2.0, 720, 0.08, 0.5, "actr"), (1, -1.5, 24, 0.08, 1.0, "actr"), (1, -1.5, 720, 1.2, 0.5, "actr"),
        (1, -4.5, 720, 0.5, 2.0, "actr"), (1, -3.5, 24, 0.2, 1.0, "exponential"),
        (1, -2.0, 24, 0.2, 0.5, "power"), (2, -3.5, 24, 0.2, 1.0, "actr"), (2, -2.0, 24, 0.08, 0.5, "actr"),
        (2, -1.5, 720, 0.08, 1.0, "actr"), (2, -4.5, 1, 1.2, 0.5, "actr"), (2, -3.5, 24, 0.5, 4.0, "exponential"),
    ])
