"""Design points of a sweep: full grid, seeded random, or seeded Latin hypercube.

Latin hypercube sampling: McKay, Beckman & Conover (1979), "A comparison of three methods for
selecting values of input variables in the analysis of output from a computer code",
Technometrics 21(2); drawn with ``scipy.stats.qmc.LatinHypercube``.
"""

from __future__ import annotations

import itertools
from typing import Any

import numpy as np
from scipy.stats import qmc

from shortcut_gym.lab.sweep.spec import ParameterRange, Variation


def grid_values(r: ParameterRange) -> list[Any]:
    """The values one parameter takes in a grid."""
    if r.values is not None:
        return list(r.values)
    assert r.low is not None and r.high is not None and r.steps is not None
    space = np.geomspace if r.scale == "log" else np.linspace
    return [float(v) for v in space(r.low, r.high, r.steps)]


def _from_unit(r: ParameterRange, u: np.ndarray) -> list[Any]:
    """Map uniforms in [0, 1) onto a parameter's range (log-uniform on a log scale)."""
    if r.values is not None:
        idx = np.minimum((u * len(r.values)).astype(int), len(r.values) - 1)
        return [r.values[i] for i in idx]
    assert r.low is not None and r.high is not None
    if r.scale == "log":
        lo, hi = np.log(r.low), np.log(r.high)
        return [float(v) for v in np.exp(lo + u * (hi - lo))]
    return [float(v) for v in r.low + u * (r.high - r.low)]


def design_points(v: Variation) -> list[dict[str, Any]]:
    """All design points, each a mapping dotted path -> value (one empty point if nothing varies)."""
    paths = list(v.parameters)
    if not paths:
        return [{}]
    if v.design == "grid":
        axes = [grid_values(v.parameters[p]) for p in paths]
        return [dict(zip(paths, combo, strict=True)) for combo in itertools.product(*axes)]
    assert v.points is not None
    rng = np.random.default_rng(v.seed)
    if v.design == "random":
        unit = rng.random((v.points, len(paths)))
    else:
        unit = qmc.LatinHypercube(d=len(paths), rng=rng).random(v.points)
    cols = [_from_unit(v.parameters[p], unit[:, j]) for j, p in enumerate(paths)]
    return [dict(zip(paths, row, strict=True)) for row in zip(*cols, strict=True)]
