"""Information criteria of a fitted model.

AIC = 2k - 2 ln L (Akaike 1974, "A new look at the statistical model identification", IEEE TAC
19(6)); BIC = k ln n - 2 ln L with n trials (Schwarz 1978, "Estimating the dimension of a
model", Annals of Statistics 6(2)).
"""

from __future__ import annotations

import math

from shortcut_gym.envs.errors import ConfigError


def aic(loglik: float, k: int) -> float:
    """Akaike information criterion 2k - 2 ln L (Akaike 1974)."""
    return 2.0 * k - 2.0 * loglik


def bic(loglik: float, k: int, n: int) -> float:
    """Bayesian information criterion k ln n - 2 ln L (Schwarz 1978)."""
    if n < 1:
        raise ConfigError(f"BIC needs at least one observation, got n={n}")
    return k * math.log(n) - 2.0 * loglik
