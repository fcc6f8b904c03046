"""Prior distributions for MAP fits, on each parameter's natural scale."""

from __future__ import annotations

import math
from typing import Any

from scipy import stats

from shortcut_gym.envs.errors import ConfigError

#: family -> meaning of its two numbers (a, b)
PRIOR_FAMILIES: dict[str, str] = {
    "normal": "mean, sd",
    "beta": "a, b",
    "gamma": "shape, scale",
    "lognormal": "mu, sigma of ln x",
}


def make_prior(family: str, a: float, b: float) -> Any:
    """A frozen scipy distribution of ``family`` with numbers ``a``, ``b`` (see :data:`PRIOR_FAMILIES`).

    Raises ValueError naming the family or the value at fault.
    """
    if family not in PRIOR_FAMILIES:
        raise ConfigError(f"unknown prior family {family!r}; known: {sorted(PRIOR_FAMILIES)}")
    if not (math.isfinite(a) and math.isfinite(b)):
        raise ConfigError(f"prior {family}: numbers must be finite, got {a!r}, {b!r}")
    if b <= 0 or (family in ("beta", "gamma") and a <= 0):
        raise ConfigError(f"prior {family}:{a:g}:{b:g}: scale/shape values must be > 0")
    if family == "normal":
        return stats.norm(a, b)
    if family == "beta":
        return stats.beta(a, b)
    if family == "gamma":
        return stats.gamma(a, scale=b)
    return stats.lognorm(b, scale=math.exp(a))
