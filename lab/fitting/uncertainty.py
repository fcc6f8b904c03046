"""Uncertainty of a fit: standard errors from the observed information, intervals, the long table.

* Standard errors: the observed information is the Hessian of -ln L (or -ln posterior for a MAP
  fit) at the estimate, taken numerically (central differences) in the optimiser's transformed
  coordinates x; cov(x) = H^-1, and the delta method maps it back: se(theta_j) =
  |d theta_j / d x_j| sd(x_j) (e.g. Pawitan 2001, "In All Likelihood", ch. 4 and 9). A parameter
  at a bound gets no standard error (the information there does not describe the uncertainty).
* Wald intervals (default): x_j +- 1.96 sd(x_j) mapped back through the transform, so they stay
  inside the bounds.
* Profile-likelihood intervals (option): the values where 2 (ln L_max - ln L_profile) = 3.84 (the
  chi-square(1) 95% point), the other parameters re-optimised at each point (Venzon & Moolgavkar
  1988, "A method for computing profile-likelihood-based confidence intervals", Applied
  Statistics 37(1)). Bounds stand in where the profile never drops that far; a parameter fitted
  at a bound gets a one-sided interval (the bound to where the profile drops), its Wald interval
  stays undefined.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
import pandas as pd
from scipy import optimize

#: 97.5% standard-normal quantile and the chi-square(1) 95% point / 2.
Z95 = 1.959963984540054
HALF_CHI2_95 = 1.920729410347062
#: Relative step of the numerical Hessian in transformed coordinates (common practice, no source).
HESSIAN_STEP = 1e-4
INTERVAL_METHODS = ("wald", "profile", "none")


def numerical_hessian(f: Callable[[np.ndarray], float], x: np.ndarray, step: float = HESSIAN_STEP) -> np.ndarray:
    """Central-difference Hessian of ``f`` at ``x`` (2k^2 + 1 evaluations)."""
    x = np.asarray(x, dtype=float)
    k = len(x)
    h = step * np.maximum(1.0, np.abs(x))
    f0 = f(x)
    hess = np.empty((k, k))
    for i in range(k):
        e_i = np.zeros(k)
        e_i[i] = h[i]
        hess[i, i] = (f(x + e_i) - 2.0 * f0 + f(x - e_i)) / h[i] ** 2
        for j in range(i):
            e_j = np.zeros(k)
            e_j[j] = h[j]
            v = (f(x + e_i + e_j) - f(x + e_i - e_j) - f(x - e_i + e_j) + f(x - e_i - e_j)) / (4.0 * h[i] * h[j])
            hess[i, j] = hess[j, i] = v
    return hess


def transformed_sd(neg_loglik: Callable[[np.ndarray], float], x: np.ndarray,
                   interior: Sequence[int]) -> tuple[np.ndarray, str]:
    """sd of each transformed coordinate (NaN outside ``interior``) and '' or the reason it failed."""
    sd = np.full(len(x), np.nan)
    idx = list(interior)
    if not idx:
        return sd, ""
    base = np.asarray(x, dtype=float)

    def sub(z: np.ndarray) -> float:
        full = base.copy()
        full[idx] = z
        return neg_loglik(full)

    hess = numerical_hessian(sub, base[idx])
    if not np.all(np.isfinite(hess)):
        return sd, "Hessian not finite"
    try:
        chol = np.linalg.cholesky(hess)
    except np.linalg.LinAlgError:
        return sd, "Hessian not positive definite (a flat or ridge direction: parameters not identified)"
    inv = np.linalg.inv(chol)
    cov = inv.T @ inv
    sd[idx] = np.sqrt(np.diag(cov))
    return sd, ""


#: Inner profile refits start no further out than this transformed coordinate (project choice:
#: logistic 4 is within 2% of a range's end and still has a usable gradient).
INNER_START_LIMIT = 4.0


def profile_interval(neg_loglik: Callable[[np.ndarray], float], x: np.ndarray, j: int,
                     boxes: Sequence[tuple[float, float]], sd_j: float, scale: float = 1.0) -> tuple[float, float]:
    """(low, high) of transformed coordinate j where the profile -ln L rises 1.92 above its minimum.

    The inner fits minimise -ln L / ``scale`` (the number of trials: see :mod:`.optimise` on why).
    """
    best = neg_loglik(x)
    others = [i for i in range(len(x)) if i != j]
    start = {+1: x.copy(), -1: x.copy()}

    def profile(value: float, side: int) -> float:
        if not others:
            z = x.copy()
            z[j] = value
            return neg_loglik(z) - best - HALF_CHI2_95

        def g(y: np.ndarray) -> float:
            z = start[side].copy()
            z[others] = y
            z[j] = value
            return neg_loglik(z) / scale

        # Three inner starts: the last refit on this side (the profile path), the maximum's own
        # coordinates pulled in from the box's flat edges, and the box's centre. A start on a flat
        # edge (a logistic coordinate near +-30, gradient ~1e-12) never moves, and a path alone can
        # stay in a poor valley: either would end the interval too early.
        inner_starts = (start[side][others], np.clip(x[others], -INNER_START_LIMIT, INNER_START_LIMIT),
                        np.array([0.5 * (boxes[i][0] + boxes[i][1]) for i in others]))
        fits = [optimize.minimize(g, s0, method="L-BFGS-B", bounds=[boxes[i] for i in others],
                                  options={"gtol": 1e-8})
                for s0 in inner_starts]
        res = min(fits, key=lambda r: float(r.fun))
        start[side][others] = res.x
        return float(res.fun) * scale - best - HALF_CHI2_95

    out = []
    step = sd_j if np.isfinite(sd_j) and sd_j > 0 else 0.5
    for side in (-1, +1):
        edge = boxes[j][0] if side < 0 else boxes[j][1]
        inner, outer = x[j], x[j] + side * step
        found = None
        for _ in range(30):
            if (outer - edge) * side >= 0:
                outer = edge
            if profile(outer, side) > 0:
                lo, hi = min(inner, outer), max(inner, outer)
                if profile(lo, side) * profile(hi, side) < 0:
                    found = optimize.brentq(lambda v, s=side: profile(v, s), lo, hi, xtol=1e-6)
                else:  # the inner refits moved: take the crossing's outer end (conservative)
                    found = outer
                break
            if outer == edge:
                break
            inner, outer = outer, x[j] + 2.0 * (outer - x[j])
        out.append(edge if found is None else found)
    return out[0], out[1]


def long_table(fits: pd.DataFrame) -> pd.DataFrame:
    """One row per participant x model x parameter: estimate, se, lower, upper, interval method.

    Reads the wide table of :func:`~shortcut_gym.lab.fitting.fit_log` (``param_<name>``,
    ``se_<name>``, ``lower_<name>``, ``upper_<name>``); a parameter held fixed has no ``se``.
    """
    rows = []
    for _, r in fits.iterrows():
        for col in fits.columns:
            if not col.startswith("param_") or pd.isna(r[col]):
                continue
            name = col[len("param_"):]
            rows.append({"participant": r["participant"], "model": r["model"], "parameter": name,
                         "estimate": float(r[col]), "se": float(r.get(f"se_{name}", np.nan)),
                         "lower": float(r.get(f"lower_{name}", np.nan)),
                         "upper": float(r.get(f"upper_{name}", np.nan)),
                         "method": r.get("interval_method", "")})
    return pd.DataFrame(rows, columns=["participant", "model", "parameter", "estimate", "se", "lower", "upper",
                                       "method"])
