"""EM with a Laplace approximation against statsmodels' linear mixed model, where Laplace is exact.

Reference: statsmodels ``MixedLM`` (Seabold & Perktold 2010, "statsmodels: Econometric and
statistical modeling with Python"; the model of Lindstrom & Bates 1988, "Newton-Raphson and EM
algorithms for linear mixed-effects models for repeated-measures data", JASA 83(404)), fitted by
maximum likelihood (``reml=False``). With Gaussian observations y_ij = x_i . z_ij + e_ij,
e ~ N(0, s^2), each participant's log-likelihood is quadratic in x_i, so the Laplace evidence is the
exact marginal likelihood and the EM fixed point (Huys et al. 2011, PLoS Computational Biology 7(4),
e1002028) is the maximum-likelihood group mean and covariance. The residual variance is held at
statsmodels' estimate: at the joint maximum, the maximiser over (mean, covariance) for that
variance is the joint one. Checked: group mean and covariance to 1e-3 relative, summed evidence
equal to statsmodels' ``llf``; the family covers unbalanced groups, one and two random effects,
full and diagonal covariance.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.regression.mixed_linear_model import MixedLMParams

from shortcut_gym.lab.fitting.laplace_em import em_laplace


def _data(seed: int, slopes: bool, groups: int = 12):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(6, 30, size=groups)  # unbalanced
    z = [np.column_stack([np.ones(n), rng.uniform(-2, 2, n)]) if slopes else np.ones((n, 1)) for n in sizes]
    true = rng.normal([1.5, -0.5][: z[0].shape[1]], [0.8, 0.6][: z[0].shape[1]], size=(groups, z[0].shape[1]))
    y = [zi @ ti + rng.normal(0.0, 1.0, len(zi)) for zi, ti in zip(z, true, strict=True)]
    return sizes, z, y


def _gaussian_loglik(y: np.ndarray, z: np.ndarray, s2: float):
    def f(x: np.ndarray) -> float:
        r = y - z @ x
        return float(-0.5 * (r @ r) / s2 - 0.5 * len(r) * math.log(2.0 * math.pi * s2))

    return f


@pytest.mark.parametrize(("seed", "slopes", "covariance"), [
    (1, False, "diagonal"), (3, True, "full"), (4, True, "diagonal"),
])
def test_em_laplace_equals_mixedlm_maximum_likelihood(seed, slopes, covariance):
    sizes, z, y = _data(seed, slopes)
    groups = np.repeat(np.arange(len(sizes)), sizes)
    zz, yy = np.vstack(z), np.concatenate(y)
    model = sm.MixedLM(yy, zz, groups=groups, exog_re=zz)
    k = zz.shape[1]
    if covariance == "diagonal" and k > 1:
        free = MixedLMParams.from_components(np.ones(k), np.eye(k))
        ref = model.fit(reml=False, free=free, method=["lbfgs"])
    else:
        ref = model.fit(reml=False)
    ours = em_laplace([_gaussian_loglik(yi, zi, ref.scale) for yi, zi in zip(y, z, strict=True)], sizes,
                      np.zeros(k), 1.0, covariance=covariance, tolerance=1e-9, max_iterations=500)
    assert ours.converged
    np.testing.assert_allclose(ours.mean, ref.fe_params, rtol=1e-3)
    cov_ref = np.asarray(ref.cov_re)
    np.testing.assert_allclose(np.diag(ours.cov), np.diag(cov_ref), rtol=1e-3)
    if covariance == "full":
        np.testing.assert_allclose(ours.cov, cov_ref, rtol=1e-3, atol=1e-3 * np.abs(cov_ref).max())
    else:
        assert np.count_nonzero(ours.cov - np.diag(np.diag(ours.cov))) == 0
    assert ours.log_evidence == pytest.approx(ref.llf, abs=1e-5)
    for post, yi, zi in zip(ours.posteriors, y, z, strict=True):  # the exact Gaussian posterior of x_i
        precision = zi.T @ zi / ref.scale + np.linalg.inv(ours.cov)
        np.testing.assert_allclose(post.cov, np.linalg.inv(precision), rtol=1e-4)
        mode = np.linalg.solve(precision, zi.T @ yi / ref.scale + np.linalg.solve(ours.cov, ours.mean))
        np.testing.assert_allclose(post.mode, mode, rtol=1e-5, atol=1e-7)
