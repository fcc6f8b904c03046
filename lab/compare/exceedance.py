"""Exceedance probabilities of a Dirichlet, and the exact Bayesian omnibus risk for small groups.

Exceedance probability of model k: P(r_k > r_j for all j != k) for r ~ Dirichlet(alpha)
(Stephan et al. 2009, "Bayesian model selection for group studies", NeuroImage 46(4), eq. 16).

* Two models: exact, r_1 ~ Beta(alpha_1, alpha_2), so xp_1 = P(r_1 > 1/2) = I_{1/2}(alpha_2, alpha_1),
  the regularised incomplete Beta function.
* More models: the gamma representation r_k = g_k / sum g, g_k ~ Gamma(alpha_k, 1) gives
  xp_k = int_0^inf Gamma(x; alpha_k) prod_{j != k} P(alpha_j, x) dx (Soch & Allefeld 2016,
  "Exceedance probabilities for the Dirichlet distribution", arXiv:1611.01439). The integral is
  taken over u = ln x (no singularity at 0 for alpha_k < 1), on the finite interval between the
  1e-17 and 1 - 1e-17 quantiles of Gamma(alpha_k) (truncation error below 2e-17), with the
  integrand evaluated in log space. Integrating over [0, inf) instead lets the quadrature miss a
  peak of width sqrt(alpha) at alpha (wrong values or NaN once counts pass about 150).
* Monte Carlo: the share of draws in which r_k is the largest, with its binomial standard error.

The variational omnibus risk (BOR) of Rigoux et al. (2014) compares lower bounds on the two
hypotheses' evidence, so it is biased towards the null for small groups: with equal evidence for
every model and participant the data cannot favour either hypothesis and the exact BOR is 1/2,
while the variational one is 0.63 for 3 participants and 2 models (0.69 for 3 models). The exact
value is a finite sum for small groups (:func:`exact_omnibus_risk`).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import integrate
from scipy.special import betainc, gammainc, gammainccinv, gammaincinv, gammaln, logsumexp

from shortcut_gym.envs.errors import ConfigError

#: Tail mass of Gamma(alpha_k) left outside the integration interval on each side.
TAIL = 1e-17
#: Most table updates (participants x models x table entries) the exact omnibus risk may cost.
EXACT_BOR_MAX_WORK = 20_000_000


def _check_alpha(alpha: np.ndarray) -> np.ndarray:
    a = np.asarray(alpha, dtype=float)
    if a.ndim != 1 or len(a) < 2:
        raise ConfigError(f"Dirichlet parameters must be a vector of >= 2 values, got shape {a.shape}")
    if not np.isfinite(a).all() or (a <= 0).any():
        raise ConfigError(f"Dirichlet parameters must be finite and > 0, got {a.tolist()}")
    return a


def exceedance_two_models(alpha: np.ndarray) -> np.ndarray:
    """Exact exceedance probabilities of Dirichlet(alpha_1, alpha_2) from the Beta distribution."""
    a = _check_alpha(alpha)
    if len(a) != 2:
        raise ConfigError(f"the Beta form needs exactly 2 models, got {len(a)}")
    p1 = float(betainc(a[1], a[0], 0.5))
    return np.array([p1, 1.0 - p1])


def _log_lower_quantile(a: float, tail: float) -> float:
    """ln of the ``tail`` quantile of Gamma(a, 1); from P(X < x) ~ x^a / Gamma(a + 1) if it underflows."""
    x = float(gammaincinv(a, tail))
    if x > 0.0:
        return math.log(x)
    return (math.log(tail) + float(gammaln(a + 1.0))) / a


def exceedance_integral(alpha: np.ndarray, tail: float = TAIL) -> np.ndarray:
    """Exceedance probabilities by one-dimensional integration over ln x (any number of models).

    Each integral runs between the ``tail`` and 1 - ``tail`` quantiles of Gamma(alpha_k) in
    u = ln x, integrand exp(alpha_k u - e^u - ln Gamma(alpha_k) + sum_j ln P(alpha_j, e^u)).
    The raw values are returned normalised to sum 1 (they sum to 1 up to the quadrature error).
    """
    a = _check_alpha(alpha)
    out = np.empty(len(a))
    for k in range(len(a)):
        others = np.delete(a, k)
        ak = float(a[k])
        lo = _log_lower_quantile(ak, tail)
        hi = math.log(float(gammainccinv(ak, tail)))
        const = -float(gammaln(ak))

        def integrand(u: float, ak: float = ak, others: np.ndarray = others, const: float = const) -> float:
            x = math.exp(u)
            with np.errstate(divide="ignore"):
                log_cdf = float(np.log(gammainc(others, x)).sum())
            value = ak * u - x + const + log_cdf
            return math.exp(value) if value > -745.0 else 0.0

        mode = math.log(max(ak, 1e-300))
        points = [mode] if lo < mode < hi else None
        out[k] = integrate.quad(integrand, lo, hi, points=points, limit=500, epsabs=1e-14, epsrel=1e-10)[0]
    total = out.sum()
    if not np.isfinite(total) or total <= 0.0:
        raise FloatingPointError(f"exceedance integral failed for alpha={a.tolist()} (sum {total})")
    return out / total


def exceedance_monte_carlo(alpha: np.ndarray, draws: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """(exceedance probabilities, their standard errors sqrt(p (1 - p) / draws)) from Dirichlet draws."""
    a = _check_alpha(alpha)
    if draws < 1:
        raise ConfigError(f"draws must be >= 1, got {draws}")
    wins = np.zeros(len(a))
    chunk = 200_000
    done = 0
    while done < draws:
        n = min(chunk, draws - done)
        g = rng.standard_gamma(a, size=(n, len(a)))  # the Dirichlet's gamma representation
        wins += np.bincount(np.argmax(g, axis=1), minlength=len(a))
        done += n
    p = wins / draws
    return p, np.sqrt(p * (1.0 - p) / draws)


def dirichlet_exceedance(alpha: np.ndarray) -> np.ndarray:
    """Exceedance probabilities: the exact Beta form for 2 models, the integral for more."""
    a = _check_alpha(alpha)
    return exceedance_two_models(a) if len(a) == 2 else exceedance_integral(a)


def exact_log_evidence_h1(log_evidence: np.ndarray, alpha0: np.ndarray) -> float:
    """ln p(Y | H1) of the random-effects model, summed exactly over model assignments.

    p(Y | H1) = E_{r ~ Dir(alpha0)} prod_n sum_k r_k L_nk = sum_c W(c) B(alpha0 + c) / B(alpha0),
    W(c) the sum over assignments with model counts c of prod_n L_{n, m_n}, built participant by
    participant on a table of counts. Cost grows as (N + 1)^K: small groups only.
    """
    lme = np.asarray(log_evidence, dtype=float)
    n, kk = lme.shape
    if not exact_bor_feasible(n, kk):
        raise ConfigError(f"exact evidence for {n} participants x {kk} models costs {_work(n, kk)} table updates "
                          f"(at most {EXACT_BOR_MAX_WORK}); use the variational BOR")
    a0 = np.asarray(alpha0, dtype=float)
    table = np.zeros((n + 1,) * kk)
    table[(0,) * kk] = 1.0
    log_scale = 0.0
    for i in range(n):
        shift = lme[i].max()
        weight = np.exp(lme[i] - shift)
        new = np.zeros_like(table)
        for k in range(kk):
            src = [slice(None)] * kk
            dst = [slice(None)] * kk
            src[k], dst[k] = slice(0, n), slice(1, n + 1)
            new[tuple(dst)] += weight[k] * table[tuple(src)]
        peak = new.max()
        table = new / peak
        log_scale += shift + math.log(peak)
    counts = np.indices(table.shape).reshape(kk, -1).T
    vals = table.reshape(-1)
    keep = vals > 0
    c = counts[keep] + a0
    log_b = gammaln(c).sum(axis=1) - gammaln(c.sum(axis=1))
    log_b0 = float(gammaln(a0).sum() - gammaln(a0.sum()))
    return log_scale + float(logsumexp(np.log(vals[keep]) + log_b - log_b0))


def exact_omnibus_risk(log_evidence: np.ndarray, alpha0: np.ndarray | float = 1.0) -> float:
    """P(H0 | Y) with equal prior odds, H0: every model equally frequent (r = alpha0 / sum alpha0).

    The exact counterpart of the variational BOR of Rigoux et al. (2014, NeuroImage 84, eq. 6);
    for groups small enough for :func:`exact_log_evidence_h1`.
    """
    lme = np.asarray(log_evidence, dtype=float)
    kk = lme.shape[1]
    a0 = np.full(kk, alpha0, dtype=float) if np.isscalar(alpha0) else np.asarray(alpha0, dtype=float)
    log_p1 = exact_log_evidence_h1(lme, a0)
    log_p0 = float(logsumexp(lme + np.log(a0 / a0.sum()), axis=1).sum())
    return float(1.0 / (1.0 + math.exp(max(min(log_p1 - log_p0, 700.0), -700.0))))


def _work(n: int, k: int) -> int:
    return n * k * (n + 1) ** k


def exact_bor_feasible(n_participants: int, n_models: int) -> bool:
    """Whether :func:`exact_omnibus_risk` stays within its work limit (small groups)."""
    return _work(n_participants, n_models) <= EXACT_BOR_MAX_WORK


__all__ = ["dirichlet_exceedance", "exact_bor_feasible", "exact_log_evidence_h1", "exact_omnibus_risk",
           "exceedance_integral", "exceedance_monte_carlo", "exceedance_two_models"]
