"""The discretised MDP of one command (states, transitions, rewards); see the package docstring.

State 0: no trace. State 1 + i * n_w + j: activation grid point i (uniform, tau +- 8 s), total
trace weight grid point j (geometric, :func:`~.memory_model.weight_grid`). An action lays its
trace, the gap to the next use passes (:func:`~.memory_model.gap_distribution`), and the new
(activation, weight) is spread bilinearly (activation linear, weight in log) over the grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from shortcut_gym.agents.planner.action_costs import action_rewards, action_times
from shortcut_gym.agents.planner.interpolation import (
    GridConstants,
    grid_constants,
    interpolate_after_traces,
    interpolate_points,
)
from shortcut_gym.agents.planner.memory_model import aged_strength, check_memory_kind, gap_distribution, weight_grid
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World

GRID_HALF_WIDTH = 8.0  # in units of the retrieval noise s


@dataclass
class CommandMDP:
    """The discretised MDP of one command: P (actions x S x S), R (S x actions, -seconds).

    State 0 holds no trace; state 1 + i * n_w + j has grid activation ``activation`` (index i) and
    total trace weight ``weight`` (index j of the weight grid, n_w = ``n_weight_bins``).
    """

    command: int
    activation: np.ndarray  # (S,) grid activation, -inf for state 0
    p_recall: np.ndarray  # (S,)
    P: np.ndarray
    R: np.ndarray
    weight: np.ndarray | None = None  # (S,) total trace weight of each state, 0 for state 0
    activation_grid: np.ndarray | None = None  # (n_bins,)
    weight_grid: np.ndarray | None = None  # (n_w,)
    _constants: GridConstants | None = field(default=None, init=False, repr=False, compare=False)

    @property
    def n_states(self) -> int:
        """Number of states (no-trace state included)."""
        return len(self.p_recall)

    def interpolate(self, values: np.ndarray, activation: float, weight: float) -> float:
        """``values`` (S,) at a memory with this activation and total trace weight: bilinear
        between grid points (activation linear, weight in log), clamped to the grid; state 0 at -inf.
        The scalar reference of :meth:`interpolate_many` and :meth:`mean_after_traces`."""
        if activation == -math.inf:
            return float(values[0])
        g = self.grid()
        x = (min(max(activation, g.act_lo), g.act_hi) - g.act_lo) / g.act_step
        i = min(int(math.floor(x)), g.n_act - 2)
        fx = x - i
        n_w = g.n_weight
        if n_w == 1:
            return float((1 - fx) * values[1 + i] + fx * values[2 + i])
        y = (min(max(math.log(max(weight, 1e-300)), g.log_weight_lo), g.log_weight_hi) - g.log_weight_lo) \
            / g.log_weight_step
        j = min(int(math.floor(y)), n_w - 2)
        fy = y - j
        base = 1 + i * n_w + j
        return float((1 - fx) * ((1 - fy) * values[base] + fy * values[base + 1])
                     + fx * ((1 - fy) * values[base + n_w] + fy * values[base + n_w + 1]))

    def interpolate_many(self, values: np.ndarray, activation: np.ndarray, weight: np.ndarray | float) -> np.ndarray:
        """:meth:`interpolate` at many points (``activation`` and ``weight`` broadcast together),
        compiled with the same operations in the same order."""
        a, w = np.broadcast_arrays(np.asarray(activation, dtype=np.float64), np.asarray(weight, dtype=np.float64))
        flat = interpolate_points(np.ascontiguousarray(values, dtype=np.float64), np.ascontiguousarray(a).reshape(-1),
                                  np.ascontiguousarray(w).reshape(-1), self.grid())
        return flat.reshape(a.shape)

    def mean_after_traces(self, values: np.ndarray, activation: np.ndarray, fresh: np.ndarray, weight: float,
                          new_weights: np.ndarray) -> np.ndarray:
        """For each new trace weight w_j, the mean over points g of ``values`` at the memory
        (ln(e^{A_g} + w_j fresh_g), ``weight`` + w_j): the old memory ``activation`` (G,) seen at
        point g plus a trace of weight w_j laid now, decayed to ``fresh`` (G,) of its weight there.
        Returns (len(new_weights),); equal to the mean of :meth:`interpolate` at those points."""
        f64 = np.float64
        pts = interpolate_after_traces(np.ascontiguousarray(values, dtype=f64), np.ascontiguousarray(activation, f64),
                                       np.ascontiguousarray(fresh, f64), float(weight),
                                       np.ascontiguousarray(new_weights, f64), self.grid())
        return np.add.reduce(pts, axis=1) / pts.shape[1]  # np.mean(axis=1) without its call overhead

    def grid(self) -> GridConstants:
        """The state grid's constants, computed once."""
        if self._constants is None:
            ag = self.activation[1:] if self.activation_grid is None else self.activation_grid
            wg = np.ones(1) if self.weight_grid is None else self.weight_grid
            self._constants = grid_constants(ag, wg)
        return self._constants


def spread(act_next: np.ndarray, w_next: np.ndarray, mass: np.ndarray, ag: np.ndarray, wg: np.ndarray,
           P: np.ndarray) -> None:
    """Add ``mass`` (states, gaps) to rows of P (states x S) at the next (activation, weight),
    bilinear between grid points (activation linear, weight linear in log), -inf to state 0."""
    n_s, n_g = act_next.shape
    rows = np.repeat(np.arange(n_s), n_g)
    a = act_next.ravel()
    w = np.broadcast_to(w_next, act_next.shape).ravel()
    m = mass.ravel()
    empty = ~np.isfinite(a)
    np.add.at(P, (rows[empty], np.zeros(int(empty.sum()), dtype=np.int64)), m[empty])
    rows, a, w, m = rows[~empty], a[~empty], w[~empty], m[~empty]
    x = (np.clip(a, ag[0], ag[-1]) - ag[0]) / (ag[1] - ag[0])
    i = np.minimum(np.floor(x).astype(np.int64), len(ag) - 2)
    fx = x - i
    n_w = len(wg)
    if n_w == 1:
        j, fy = np.zeros(len(a), dtype=np.int64), np.zeros(len(a))
    else:
        lw = np.log(wg)
        y = (np.clip(np.log(np.maximum(w, 1e-300)), lw[0], lw[-1]) - lw[0]) / (lw[1] - lw[0])
        j = np.minimum(np.floor(y).astype(np.int64), n_w - 2)
        fy = y - j
    for di, wi in ((0, 1 - fx), (1, fx)):
        for dj, wj in ((0, 1 - fy), (1, fy)):
            if dj == 1 and n_w == 1:
                continue
            np.add.at(P, (rows, 1 + (i + di) * n_w + np.minimum(j + dj, n_w - 1)), m * wi * wj)


def clean_rows(P: np.ndarray) -> None:
    """Make every row of ``P`` (actions x S x S) a probability vector in place: rounding in the
    bilinear weights leaves entries like -1e-15 and rows off 1 by 1e-16; clip at 0 and divide by
    the row sum, so entries are >= 0 and rows sum to 1 within 1e-12 (as MDP checkers require)."""
    np.clip(P, 0.0, None, out=P)
    P /= P.sum(axis=2, keepdims=True)


def build_command_mdp(world: World, command: int, n_bins: int = 40, keyboard_share: float = 0.5,
                      next_hotkey_share: float | None = None, n_weight_bins: int = 10) -> CommandMDP:
    """The discretised MDP of ``command`` (see the package docstring for every approximation).

    R is the marginal cost of the action: its own expected time plus the hand's return paid by the
    next trial (``next_hotkey_share``, default ``keyboard_share``, see :func:`action_times`).
    """
    if n_bins < 2:
        raise ConfigError(f"n_bins must be >= 2, got {n_bins}")
    if n_weight_bins < 1:
        raise ConfigError(f"n_weight_bins must be >= 1, got {n_weight_bins}")
    check_memory_kind(world)
    m = world.memory
    ag = np.linspace(m.threshold - GRID_HALF_WIDTH * m.noise_s, m.threshold + GRID_HALF_WIDTH * m.noise_s, n_bins)
    wg = weight_grid(world, n_weight_bins)
    n_w = len(wg)
    act = np.concatenate([[-np.inf], np.repeat(ag, n_w)])
    wts = np.concatenate([[0.0], np.tile(wg, n_bins)])
    p_rec = np.concatenate([[0.0], 1.0 / (1.0 + np.exp(-(np.repeat(ag, n_w) - m.threshold) / m.noise_s))])
    gaps, gp = gap_distribution(world, command)
    strength = np.where(np.isfinite(act), np.exp(act), 0.0)
    w = m.weights
    label = float(world.command_constants()[command, k.C_LABEL_W])  # a key label's trace on menu paths
    n = len(act)
    P = np.zeros((3, n, n))
    for a, outcomes in ((k.MENU, [(np.ones(n), w.menu + label)]), (k.LEARN, [(np.ones(n), w.learn + label)]),
                        (k.HOTKEY, [(p_rec, w.hotkey_success), (1 - p_rec, w.hotkey_failure + label)])):
        for prob, weight in outcomes:
            nxt = aged_strength(world, strength, wts, weight, gaps)
            with np.errstate(divide="ignore"):
                a_next = np.log(nxt)
            spread(a_next, (wts + weight)[:, None], prob[:, None] * gp[None, :], ag, wg, P[a])
    clean_rows(P)
    R = action_rewards(action_times(world, command, keyboard_share, next_hotkey_share), act, p_rec)
    return CommandMDP(command, act, p_rec, P, R, wts, ag, wg)
