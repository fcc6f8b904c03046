"""Compiled bilinear interpolation of a value vector over the (activation, log weight) grid.

The grid constants travel as one :class:`GridConstants` NamedTuple (numba reads it as a tuple of
named fields). :meth:`CommandMDP.interpolate` is the readable scalar reference of these functions;
they perform the same operations in the same order.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numba import njit


class GridConstants(NamedTuple):
    """The state grid of one command's MDP: activation (uniform) and ln total weight (uniform)."""

    act_lo: float
    act_hi: float
    act_step: float
    n_act: int
    log_weight: np.ndarray  # (n_w,)
    log_weight_lo: float
    log_weight_hi: float
    log_weight_step: float  # 1.0 when there is one weight point
    n_weight: int


def grid_constants(activation_grid: np.ndarray, weight_grid: np.ndarray) -> GridConstants:
    """:class:`GridConstants` of these grids."""
    lw = np.log(weight_grid)
    lw_step = float(lw[1] - lw[0]) if len(weight_grid) > 1 else 1.0
    return GridConstants(float(activation_grid[0]), float(activation_grid[-1]),
                         float(activation_grid[1] - activation_grid[0]), len(activation_grid), lw, float(lw[0]),
                         float(lw[-1]), lw_step, len(weight_grid))


@njit(cache=True)
def bilinear_point(values: np.ndarray, a: float, weight: float, g: GridConstants) -> float:
    """CommandMDP.interpolate at one point, operation for operation."""
    if a == -np.inf:
        return values[0]
    x = (min(max(a, g.act_lo), g.act_hi) - g.act_lo) / g.act_step
    i = min(int(math.floor(x)), g.n_act - 2)
    fx = x - i
    n_w = g.n_weight
    if n_w == 1:
        return (1 - fx) * values[1 + i] + fx * values[2 + i]
    y = (min(max(math.log(max(weight, 1e-300)), g.log_weight_lo), g.log_weight_hi) - g.log_weight_lo) \
        / g.log_weight_step
    j = min(int(math.floor(y)), n_w - 2)
    fy = y - j
    base = 1 + i * n_w + j
    return ((1 - fx) * ((1 - fy) * values[base] + fy * values[base + 1])
            + fx * ((1 - fy) * values[base + n_w] + fy * values[base + n_w + 1]))


@njit(cache=True)
def interpolate_points(values: np.ndarray, act: np.ndarray, weight: np.ndarray, g: GridConstants) -> np.ndarray:
    """bilinear_point at each (act[p], weight[p])."""
    out = np.empty(len(act))
    for p in range(len(act)):
        out[p] = bilinear_point(values, act[p], weight[p], g)
    return out


@njit(cache=True)
def interpolate_after_traces(values: np.ndarray, act: np.ndarray, fresh: np.ndarray, weight: float,
                             new_weights: np.ndarray, g: GridConstants) -> np.ndarray:
    """(new weights, points): bilinear_point at (ln(e^act + w fresh), weight + w), as
    CommandMDP.mean_after_traces."""
    out = np.empty((len(new_weights), len(act)))
    for p in range(len(act)):
        old = math.exp(act[p]) if act[p] > -np.inf else 0.0
        for j in range(len(new_weights)):
            s = old + new_weights[j] * fresh[p]
            out[j, p] = bilinear_point(values, math.log(s) if s > 0 else -np.inf, weight + new_weights[j], g)
    return out


@njit(cache=True)
def weight_coordinate(weight: float, g: GridConstants) -> tuple[int, float]:
    """The weight half of :func:`bilinear_point`: (cell j, fraction fy) of ``weight`` on the
    log-weight grid, the same operations (so a caller valuing many activations at one weight
    takes the logarithm once); (0, 0.0) on a one-point weight grid, where it is not read."""
    if g.n_weight == 1:
        return 0, 0.0
    y = (min(max(math.log(max(weight, 1e-300)), g.log_weight_lo), g.log_weight_hi) - g.log_weight_lo) \
        / g.log_weight_step
    j = min(int(math.floor(y)), g.n_weight - 2)
    return j, y - j


@njit(cache=True)
def bilinear_at(values: np.ndarray, a: float, j: int, fy: float, g: GridConstants) -> float:
    """:func:`bilinear_point` at activation ``a`` and the weight of :func:`weight_coordinate`
    (``j``, ``fy``): the same value, bit for bit."""
    if a == -np.inf:
        return values[0]
    x = (min(max(a, g.act_lo), g.act_hi) - g.act_lo) / g.act_step
    i = min(int(math.floor(x)), g.n_act - 2)
    fx = x - i
    n_w = g.n_weight
    if n_w == 1:
        return (1 - fx) * values[1 + i] + fx * values[2 + i]
    base = 1 + i * n_w + j
    return ((1 - fx) * ((1 - fy) * values[base] + fy * values[base + 1])
            + fx * ((1 - fy) * values[base + n_w] + fy * values[base + n_w + 1]))
