"""Expectation-maximisation with Gaussian group priors and a Laplace approximation per participant.

The method of Huys et al. (2011), "Disentangling the roles of approach, activation and valence in
instrumental and Pavlovian responding", PLoS Computational Biology 7(4), e1002028 (methods: EM with
a Laplace approximation, and the integrated BIC). Every participant i has a parameter vector x_i in
the optimiser's unbounded coordinates, drawn from one group prior N(mu, Sigma):

* E step: each participant's MAP m_i = argmax ln L_i(x) + ln N(x; mu, Sigma), and the Hessian H_i
  of the negative log posterior there; the posterior is approximated by N(m_i, S_i = H_i^-1).
* M step: mu = mean_i m_i, Sigma = mean_i [S_i + (m_i - mu)(m_i - mu)^T] (its diagonal only for a
  diagonal prior).
* Laplace evidence of participant i: ln L_i(m_i) + ln N(m_i; mu, Sigma) + k/2 ln 2 pi - 1/2 ln |H_i|,
  exact when ln L_i is quadratic in x (a Gaussian likelihood linear in x).
* Integrated BIC: -2 sum_i ln p(D_i | mu, Sigma) + (number of group parameters) ln(total trials).

This module knows nothing about agents: it takes one log-likelihood function of the unbounded
coordinates per participant (:mod:`.hierarchical` builds them from a trial log).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize
from threadpoolctl import threadpool_limits

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.fitting.uncertainty import numerical_hessian

FreeLogLik = Callable[[np.ndarray], float]

#: Smallest group variance (unbounded coordinates) kept by the M step; below it the prior would be
#: a point mass and the Laplace evidence undefined (an assumption of this project, no source).
MIN_VARIANCE = 1e-10


@dataclass
class ParticipantPosterior:
    """One participant's Laplace posterior in unbounded coordinates."""

    mode: np.ndarray  # (k,) MAP
    cov: np.ndarray  # (k, k) inverse Hessian of the negative log posterior
    loglik: float  # ln L at the MAP
    log_prior: float  # ln N(MAP; mu, Sigma)
    log_evidence: float  # Laplace approximation of ln p(D_i | mu, Sigma)
    hessian_repaired: bool  # the Hessian was not positive definite and its eigenvalues were floored

    @property
    def sd(self) -> np.ndarray:
        """Posterior standard deviations (unbounded coordinates)."""
        return np.sqrt(np.diag(self.cov))


@dataclass
class EMResult:
    """Group prior, per-participant posteriors and the evidence of a hierarchical fit."""

    mean: np.ndarray  # (k,) group mean
    cov: np.ndarray  # (k, k) group covariance (diagonal unless covariance='full')
    posteriors: list[ParticipantPosterior]
    n_obs: int  # total number of observations (trials) over participants
    covariance: str
    iterations: int
    converged: bool
    history: list[float] = field(default_factory=list)  # summed Laplace evidence after each E step

    @property
    def k(self) -> int:
        """Number of parameters per participant."""
        return len(self.mean)

    @property
    def n_group_params(self) -> int:
        """Group-level parameters: k means and k variances (k(k+1)/2 covariances when full)."""
        return self.k + (self.k if self.covariance == "diagonal" else self.k * (self.k + 1) // 2)

    @property
    def log_evidence(self) -> float:
        """Summed Laplace evidence ln p(D | mu, Sigma) at the fitted prior."""
        return float(sum(p.log_evidence for p in self.posteriors))

    @property
    def ibic(self) -> float:
        """Integrated BIC, -2 ln p(D | mu, Sigma) + |group parameters| ln(total trials) (Huys et al. 2011)."""
        return -2.0 * self.log_evidence + self.n_group_params * math.log(self.n_obs)


def gaussian_logpdf(x: np.ndarray, mean: np.ndarray, cov: np.ndarray) -> float:
    """ln N(x; mean, cov) through a Cholesky factor."""
    chol = np.linalg.cholesky(cov)
    z = np.linalg.solve(chol, x - mean)
    return float(-0.5 * z @ z - np.log(np.diag(chol)).sum() - 0.5 * len(x) * math.log(2.0 * math.pi))


def _repair(hess: np.ndarray, floor: float) -> tuple[np.ndarray, bool]:
    """``hess`` made symmetric positive definite (eigenvalues below ``floor`` raised to it)."""
    sym = 0.5 * (hess + hess.T)
    values, vectors = np.linalg.eigh(sym)
    if values.min() >= floor:
        return sym, False
    return (vectors * np.maximum(values, floor)) @ vectors.T, True


def posterior_of(loglik: FreeLogLik, mean: np.ndarray, cov: np.ndarray, starts: Sequence[np.ndarray],
                 bounds: Sequence[tuple[float, float]] | None = None) -> ParticipantPosterior:
    """MAP and Laplace posterior of one participant under the prior N(mean, cov), best of ``starts``."""
    precision = np.linalg.inv(cov)
    log_norm = -0.5 * float(np.linalg.slogdet(cov)[1]) - 0.5 * len(mean) * math.log(2.0 * math.pi)

    def log_prior(x: np.ndarray) -> float:
        d = x - mean
        return float(log_norm - 0.5 * d @ precision @ d)

    def negative_log_posterior(x: np.ndarray) -> float:
        value = loglik(x) + log_prior(x)
        return -value if np.isfinite(value) else 1e300

    best = None
    for x0 in starts:
        x_start = np.asarray(x0, dtype=float)
        if bounds is not None:
            x_start = np.clip(x_start, [b[0] for b in bounds], [b[1] for b in bounds])
        res = optimize.minimize(negative_log_posterior, x_start, method="L-BFGS-B", bounds=bounds,
                                options={"ftol": 1e-13, "gtol": 1e-9, "maxiter": 2000})
        if best is None or res.fun < best.fun:
            best = res
    assert best is not None
    mode = np.asarray(best.x, dtype=float)
    floor = 1e-6 * float(np.min(np.diag(precision)))
    hess, repaired = _repair(numerical_hessian(negative_log_posterior, mode), floor)
    ll = float(loglik(mode))
    lp = log_prior(mode)
    log_det = float(np.linalg.slogdet(hess)[1])
    k = len(mode)
    evidence = ll + lp + 0.5 * k * math.log(2.0 * math.pi) - 0.5 * log_det
    return ParticipantPosterior(mode, np.linalg.inv(hess), ll, lp, evidence, repaired)


def sampled_log_evidence(loglik: FreeLogLik, mean: np.ndarray, cov: np.ndarray, draws: int,
                         rng: np.random.Generator) -> tuple[float, float]:
    """ln p(D_i | mu, Sigma) estimated by sampling the prior, ln (1/K sum_k L_i(x_k)) with x_k ~ N(mu, Sigma)
    (the estimate of Huys et al. 2011 for the iBIC), and its standard error by the delta method."""
    if draws < 2:
        raise ConfigError(f"draws must be >= 2, got {draws}")
    x = rng.multivariate_normal(mean, cov, size=draws)
    values = np.array([loglik(row) for row in x])
    top = float(values.max())
    w = np.exp(values - top)
    return top + math.log(float(w.mean())), float(w.std(ddof=1) / w.mean() / math.sqrt(draws))


def em_laplace(
    logliks: Sequence[FreeLogLik],
    n_obs: Sequence[int],
    init_mean: np.ndarray,
    init_var: np.ndarray | float = 10.0,
    bounds: Sequence[tuple[float, float]] | None = None,
    covariance: str = "diagonal",
    tolerance: float = 1e-3,
    max_iterations: int = 200,
    n_starts: int = 3,
    rng: np.random.Generator | None = None,
) -> EMResult:
    """Fit the group prior N(mu, Sigma) by EM over participants' log-likelihoods of unbounded coordinates.

    ``init_var`` is the starting group variance (10 by default, a broad prior: an assumption of this
    project, no source). The first E step tries ``n_starts`` starts per participant (the prior
    mean, then draws from the starting prior); later ones start from the previous MAP and the
    current mean. Stops when the summed Laplace evidence changes by less than ``tolerance`` (nats)
    between iterations, or after ``max_iterations`` (then ``converged`` is False).
    """
    if covariance not in ("diagonal", "full"):
        raise ConfigError(f"covariance must be 'diagonal' or 'full', got {covariance!r}")
    if len(logliks) < 2 or len(logliks) != len(n_obs):
        raise ConfigError(f"need >= 2 participants with one observation count each, got {len(logliks)} "
                          f"functions and {len(n_obs)} counts")
    if n_starts < 1 or max_iterations < 1 or not tolerance > 0:
        raise ConfigError(f"n_starts and max_iterations must be >= 1 and tolerance > 0, got {n_starts}, "
                          f"{max_iterations}, {tolerance}")
    mean = np.asarray(init_mean, dtype=float).copy()
    k = len(mean)
    cov = np.diag(np.broadcast_to(np.asarray(init_var, dtype=float), (k,)).copy())
    if not (np.isfinite(mean).all() and (np.diag(cov) > 0).all()):
        raise ConfigError(f"starting mean must be finite and variances > 0, got {mean.tolist()}, {np.diag(cov)}")
    rng = rng if rng is not None else np.random.default_rng(0)
    with threadpool_limits(limits=1, user_api="blas"):  # BLAS threads cost more than these tiny problems
        return _iterate(logliks, n_obs, mean, cov, bounds, covariance, tolerance, max_iterations, n_starts, rng)


def _iterate(logliks: Sequence[FreeLogLik], n_obs: Sequence[int], mean: np.ndarray, cov: np.ndarray,
             bounds: Sequence[tuple[float, float]] | None, covariance: str, tolerance: float, max_iterations: int,
             n_starts: int, rng: np.random.Generator) -> EMResult:
    k = len(mean)
    posteriors: list[ParticipantPosterior] = []
    history: list[float] = []
    converged = False
    iterations = 0
    for iterations in range(1, max_iterations + 1):  # noqa: B007 - the count is reported
        if not posteriors:
            draws = [mean + rng.standard_normal(k) * np.sqrt(np.diag(cov)) for _ in range(n_starts - 1)]
            posteriors = [posterior_of(f, mean, cov, [mean, *draws], bounds) for f in logliks]
        else:
            posteriors = [posterior_of(f, mean, cov, [old.mode], bounds)
                          for f, old in zip(logliks, posteriors, strict=True)]
        history.append(float(sum(p.log_evidence for p in posteriors)))
        if len(history) > 1 and abs(history[-1] - history[-2]) < tolerance:
            converged = True
            break
        modes = np.array([p.mode for p in posteriors])
        mean = modes.mean(axis=0)
        dev = modes - mean
        cov = np.mean([p.cov for p in posteriors], axis=0) + dev.T @ dev / len(posteriors)
        if covariance == "diagonal":
            cov = np.diag(np.diag(cov))
        cov = 0.5 * (cov + cov.T) + MIN_VARIANCE * np.eye(k)
    return EMResult(mean, cov, posteriors, int(sum(n_obs)), covariance, iterations, converged, history)
