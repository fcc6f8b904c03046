"""Model comparison: per participant x model tables, summed criteria, random-effects BMS.

Random-effects Bayesian model selection treats each participant's model as drawn from unknown
model frequencies r ~ Dirichlet(alpha) and is fitted by the variational scheme of Stephan et al.
(2009), "Bayesian model selection for group studies", NeuroImage 46(4), eqs. 9-14 and Rigoux et
al. (2014), "Bayesian model selection for group studies - revisited", NeuroImage 84, appendix
eqs. A17-A21 (free energies of H1 and of the null H0 of equal frequencies, Bayesian omnibus risk
BOR = 1 / (1 + exp(F1 - F0)), protected exceedance pxp = xp (1 - BOR) + BOR / K, eq. 7).
Exceedance probabilities of the Dirichlet are computed by one-dimensional integration over the
gamma representation (Soch & Allefeld 2016, "Exceedance probabilities for the Dirichlet
distribution", arXiv:1611.01439). Log evidence per participant is approximated by -BIC / 2
(Schwarz 1978), the usual choice when no marginal likelihood is computed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import integrate
from scipy.special import digamma, gammainc, gammaln, softmax


def comparison_table(fits: pd.DataFrame) -> pd.DataFrame:
    """Per participant x model: ln L, k, n, AIC, BIC, delta BIC to the participant's best, rank."""
    need = ["participant", "model", "loglik", "n_params", "n_trials", "aic", "bic"]
    missing = [c for c in need if c not in fits.columns]
    if missing:
        raise ValueError(f"fit table lacks column(s) {missing}")
    t = fits[need].copy()
    t["delta_bic"] = t["bic"] - t.groupby("participant")["bic"].transform("min")
    t["delta_aic"] = t["aic"] - t.groupby("participant")["aic"].transform("min")
    t["bic_rank"] = t.groupby("participant")["bic"].rank(method="min").astype(int)
    return t.sort_values(["participant", "bic"]).reset_index(drop=True)


def summed_criteria(fits: pd.DataFrame) -> pd.DataFrame:
    """Per model: summed ln L, AIC, BIC over participants, and participants it wins by BIC."""
    t = comparison_table(fits)
    out = t.groupby("model").agg(participants=("participant", "nunique"), loglik=("loglik", "sum"),
                                 n_params=("n_params", "sum"), aic=("aic", "sum"), bic=("bic", "sum"),
                                 wins_bic=("bic_rank", lambda r: int((r == 1).sum())))
    out["delta_bic"] = out["bic"] - out["bic"].min()
    return out.sort_values("bic").reset_index()


def log_evidence_matrix(fits: pd.DataFrame) -> tuple[np.ndarray, list[str], list[str]]:
    """(participants x models) matrix of -BIC/2, participant ids, model labels; errors on gaps."""
    wide = fits.pivot(index="participant", columns="model", values="bic")
    if wide.isna().any().any():
        p, m = np.argwhere(wide.isna().to_numpy())[0]
        raise ValueError(f"no BIC for participant {wide.index[p]!r}, model {wide.columns[m]!r}")
    values = -0.5 * wide.to_numpy(dtype=float)
    if not np.isfinite(values).all():
        p, m = np.argwhere(~np.isfinite(values))[0]
        raise ValueError(f"BIC of participant {wide.index[p]!r}, model {wide.columns[m]!r} is not finite")
    return values, [str(i) for i in wide.index], [str(c) for c in wide.columns]


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

    def table(self) -> pd.DataFrame:
        """One row per model."""
        return pd.DataFrame({"model": self.models, "alpha": self.alpha, "expected_frequency": self.expected_frequency,
                             "exceedance": self.exceedance, "protected_exceedance": self.protected_exceedance,
                             "bor": self.bor})


def dirichlet_exceedance(alpha: np.ndarray) -> np.ndarray:
    """P(r_k is the largest) for r ~ Dirichlet(alpha), by integration (Soch & Allefeld 2016)."""
    a = np.asarray(alpha, dtype=float)
    out = np.empty(len(a))
    for i in range(len(a)):
        others = np.delete(a, i)

        def integrand(x: float, i: int = i, others: np.ndarray = others) -> float:
            if x <= 0.0:
                return 0.0
            log_pdf = (a[i] - 1.0) * math.log(x) - x - gammaln(a[i])
            return float(np.prod(gammainc(others, x)) * math.exp(log_pdf))

        out[i] = integrate.quad(integrand, 0.0, np.inf, limit=200)[0]
    return out / out.sum()


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
    changes by less than ``tolerance``.
    """
    lme = np.asarray(log_evidence, dtype=float)
    if lme.ndim != 2 or lme.shape[1] < 2 or lme.shape[0] < 1:
        raise ValueError(f"log evidence must be participants x models with >= 2 models, got shape {lme.shape}")
    if not np.isfinite(lme).all():
        raise ValueError("log evidence holds non-finite values")
    n, kk = lme.shape
    models = models or [f"model{j}" for j in range(kk)]
    if len(models) != kk:
        raise ValueError(f"{len(models)} model names for {kk} columns")
    a0 = np.full(kk, float(alpha0)) if np.isscalar(alpha0) else np.asarray(alpha0, dtype=float)
    if a0.shape != (kk,) or (a0 <= 0).any():
        raise ValueError(f"alpha0 must be {kk} positive numbers, got {alpha0!r}")
    alpha = a0.copy()
    f_old = -np.inf
    z = np.full((n, kk), 1.0 / kk)
    iterations = 0
    for iterations in range(1, max_iterations + 1):  # noqa: B007 - the count is reported
        z = softmax(lme + digamma(alpha)[None, :], axis=1)
        alpha = a0 + z.sum(axis=0)
        f1 = _free_energy_h1(lme, a0, alpha, z)
        if abs(f1 - f_old) < tolerance:
            break
        f_old = f1
    f1 = _free_energy_h1(lme, a0, alpha, z)
    f0 = _free_energy_h0(lme, a0)
    bor = 1.0 / (1.0 + math.exp(min(f1 - f0, 700.0)))
    xp = dirichlet_exceedance(alpha)
    return BMSResult(models=list(models), alpha=alpha, attribution=z, expected_frequency=alpha / alpha.sum(),
                     exceedance=xp, protected_exceedance=xp * (1.0 - bor) + bor / kk, bor=bor, free_energy=f1,
                     iterations=iterations)


def bms_of_fits(fits: pd.DataFrame, alpha0: float = 1.0) -> BMSResult:
    """Random-effects BMS with -BIC/2 as each participant's log evidence."""
    lme, _, models = log_evidence_matrix(fits)
    return random_effects_bms(lme, models, alpha0)
