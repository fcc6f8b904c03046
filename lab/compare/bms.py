"""Random-effects Bayesian model selection (variational), with exceedance and protected exceedance.

Each participant's model is drawn from unknown model frequencies r ~ Dirichlet(alpha), fitted by
the variational scheme of Stephan et al. (2009), "Bayesian model selection for group studies",
NeuroImage 46(4), eqs. 9-14 and Rigoux et al. (2014), "Bayesian model selection for group studies
- revisited", NeuroImage 84, appendix eqs. A17-A21 (free energies of H1 and of the null H0 of equal
frequencies, Bayesian omnibus risk BOR = 1 / (1 + exp(F1 - F0)), protected exceedance
pxp = xp (1 - BOR) + BOR / K, eq. 7). Exceedance probabilities: :mod:`.exceedance` (exact for two
models, a bounded log-space integral for more).

Caveat (small groups): F1 and F0 are lower bounds of different tightness, so the variational BOR
leans to the null when there are few participants: with equal evidence everywhere it is 0.63 for
3 participants and 2 models where the exact value is 0.50. ``BMSResult.bor_exact`` gives the exact
value whenever the group is small enough to sum over its model assignments; the protected
exceedance keeps the published (variational) BOR.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.special import digamma, expit, gammaln, softmax

from shortcut_gym.envs.errors import ConfigError, DataError
from shortcut_gym.lab.compare.exceedance import dirichlet_exceedance, exact_bor_feasible, exact_omnibus_risk


@dataclass
class BMSResult:
    """Random-effects BMS: Dirichlet posterior, frequencies, exceedance, protected exceedance."""

    models: list[str]
    alpha: np.ndarray  # posterior Dirichlet parameters (K,)
    attribution: np.ndarray  # participants x models posterior model probabilities
    expected_frequency: np.ndarray  # alpha / sum(alpha)
    exceedance: np.ndarray
    protected_exceedance: np.ndarray
    bor: float
    free_energy: float
    iterations: int
    bor_exact: float | None = None  # exact P(H0 | Y) when the group is small enough, else None

    def table(self) -> pd.DataFrame:
        """One row per model."""
        return pd.DataFrame({"model": self.models, "alpha": self.alpha, "expected_frequency": self.expected_frequency,
                             "exceedance": self.exceedance, "protected_exceedance": self.protected_exceedance,
                             "bor": self.bor, "bor_exact": self.bor_exact})


def _free_energy_h1(lme: np.ndarray, alpha0: np.ndarray, alpha: np.ndarray, z: np.ndarray) -> float:
    """Rigoux et al. 2014 eq. A20 (participants x models layout)."""
    e_log_r = digamma(alpha) - digamma(alpha.sum())
    joint = float((z * (lme + e_log_r)).sum() + ((alpha0 - 1.0) * e_log_r).sum())
    joint += float(gammaln(alpha0.sum()) - gammaln(alpha0).sum())
    entropy_z = float(-(z * np.log(z + 1e-300)).sum())
    entropy_r = float(gammaln(alpha).sum() - gammaln(alpha.sum()) - ((alpha - 1.0) * e_log_r).sum())
    return joint + entropy_z + entropy_r


def _free_energy_h0(lme: np.ndarray, alpha0: np.ndarray) -> float:
    """Rigoux et al. 2014 eqs. A17-A19: every model equally frequent (prior r = alpha0 / sum)."""
    log_prior = np.log(alpha0 / alpha0.sum())
    w = softmax(lme + log_prior, axis=1)
    return float((w * (lme + log_prior - np.log(w + 1e-300))).sum())


def random_effects_bms(
    log_evidence: np.ndarray,
    models: list[str] | None = None,
    alpha0: np.ndarray | float = 1.0,
    tolerance: float = 1e-10,
    max_iterations: int = 10_000,
) -> BMSResult:
    """Random-effects BMS on a (participants x models) log-evidence matrix.

    ``alpha0``: prior Dirichlet parameters (1 each by default, Stephan et al. 2009). Iterates
    z = softmax(lme + psi(alpha) - psi(sum alpha)), alpha = alpha0 + sum z until the free energy
    changes by less than ``tolerance`` times max(1, |F|) (relative, so that large groups, whose F
    is large, stop at float precision).
    """
    lme = np.asarray(log_evidence, dtype=float)
    if lme.ndim != 2 or lme.shape[1] < 2 or lme.shape[0] < 1:
        raise DataError(f"log evidence must be participants x models with >= 2 models, got shape {lme.shape}")
    if not np.isfinite(lme).all():
        raise DataError("log evidence holds non-finite values")
    n, kk = lme.shape
    models = models or [f"model{j}" for j in range(kk)]
    if len(models) != kk:
        raise DataError(f"{len(models)} model names for {kk} columns")
    a0 = np.full(kk, alpha0, dtype=float) if np.isscalar(alpha0) else np.asarray(alpha0, dtype=float)
    if a0.shape != (kk,) or (a0 <= 0).any():
        raise ConfigError(f"alpha0 must be {kk} positive numbers, got {alpha0!r}")
    alpha = a0.copy()
    f_old = -np.inf
    z = np.full((n, kk), 1.0 / kk)
    iterations = 0
    for iterations in range(1, max_iterations + 1):  # noqa: B007 - the count is reported
        z = softmax(lme + digamma(alpha)[None, :], axis=1)
        alpha = a0 + z.sum(axis=0)
        f1 = _free_energy_h1(lme, a0, alpha, z)
        if abs(f1 - f_old) < tolerance * max(1.0, abs(f1)):
            break
        f_old = f1
    f1 = _free_energy_h1(lme, a0, alpha, z)
    f0 = _free_energy_h0(lme, a0)
    bor = float(expit(f0 - f1))
    xp = dirichlet_exceedance(alpha)
    exact = exact_omnibus_risk(lme, a0) if exact_bor_feasible(n, kk) else None
    return BMSResult(models=list(models), alpha=alpha, attribution=z, expected_frequency=alpha / alpha.sum(),
                     exceedance=xp, protected_exceedance=xp * (1.0 - bor) + bor / kk, bor=bor, free_energy=f1,
                     iterations=iterations, bor_exact=exact)
