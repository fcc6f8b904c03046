"""Where the optimiser starts: plausible ranges per parameter and random draws within them.

A parameter's plausible range is, in this order: the user's ``ranges[name]`` (natural units), the
agent's own ``ParamSpec.plausible`` (documented beside each parameter), else a range derived
from its default: +-1 around the default in the optimiser's coordinate (logit or log transform),
+-2 in natural units for an untransformed parameter (common practice, no source). Draws are
uniform over the range in the optimiser's coordinate (so log-uniform for a log-transformed rate).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from shortcut_gym.agents.base import ParamSpec
from shortcut_gym.envs.errors import ConfigError


def plausible_range(s: ParamSpec, ranges: Mapping[str, tuple[float, float]] | None = None) -> tuple[float, float]:
    """(low, high) natural values of one parameter (see the module docstring); checked against its bounds."""
    given = (ranges or {}).get(s.name)
    if given is not None:
        lo, hi = float(given[0]), float(given[1])
        if not (math.isfinite(lo) and math.isfinite(hi) and s.lower <= lo <= hi <= s.upper):
            raise ConfigError(f"plausible range {s.name}=({given[0]}, {given[1]}) must be finite numbers low <= high "
                              f"within the bounds [{s.lower}, {s.upper}]")
        return lo, hi
    if s.plausible is not None:
        return float(s.plausible[0]), float(s.plausible[1])
    if s.transform in ("logit", "log"):
        centre = s.to_free(s.default)
        return s.from_free(centre - 1.0), s.from_free(centre + 1.0)
    return max(s.lower, s.default - 2.0), min(s.upper, s.default + 2.0)


def check_ranges(specs: Mapping[str, ParamSpec], ranges: Mapping[str, tuple[float, float]] | None,
                 owner: str) -> None:
    """Raise ConfigError naming ranges given for parameters the model does not have, or bad ranges."""
    unknown = sorted(set(ranges or {}) - set(specs))
    if unknown:
        raise ConfigError(f"{owner}: plausible range(s) for unknown parameter(s) {unknown}; known: {list(specs)}")
    for name in ranges or {}:
        plausible_range(specs[name], ranges)


def draw_in_range(s: ParamSpec, rng: np.random.Generator,
                  ranges: Mapping[str, tuple[float, float]] | None = None) -> float:
    """One natural value drawn uniformly over the plausible range in the optimiser's coordinate."""
    lo, hi = plausible_range(s, ranges)
    if lo == hi:
        return lo
    if s.transform in ("logit", "log"):
        return float(np.clip(s.from_free(rng.uniform(s.to_free(lo), s.to_free(hi))), lo, hi))
    return float(rng.uniform(lo, hi))
