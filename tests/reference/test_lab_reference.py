"""Reference checks of the lab's fitting and model selection against outside implementations.

* Multinomial logit: statsmodels' MNLogit (Seabold & Perktold 2010, "statsmodels: Econometric and
  statistical modeling with Python"), fitted on the same design matrix; its ``llf``, ``aic``,
  ``bic`` must equal ours. statsmodels' MNLogit BIC is -2 llf + ln(n) k, the Schwarz (1978) form.
* Random-effects BMS: groupBMC 1.0 (PyPI; Python port of the VBA toolbox's VBA_groupBMC by
  L. Rigoux, implementing Stephan et al. 2009 and Rigoux et al. 2014) on the same log-evidence
  matrix. groupBMC's default prior is alpha0 = 1/K per model, and its null-model free energy uses
  ln(alpha0) as the log prior frequency, which equals our ln(alpha0 / sum alpha0) only for
  alpha0 = 1/K; so the full comparison (including BOR and pxp) uses alpha0 = 1/K, and the
  comparison at alpha0 = 1 covers frequencies and exceedance probabilities.
* BIC formula: k ln n - 2 ln L (Schwarz 1978, "Estimating the dimension of a model").
* Standard errors: the static softmax is a multinomial logit with menu as the reference choice and
  its parameters untransformed (b_a, w_a_c are MNLogit's params column a, rows constant and
  covariates, exactly), so the observed-information standard errors must equal MNLogit's ``bse``
  (the inverse of its analytic Hessian; Greene 2012, "Econometric Analysis", ch. 18) to 1e-3
  relative.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from groupBMC.groupBMC import GroupBMC

from shortcut_gym.agents.base import AgentContext
from shortcut_gym.agents.static_softmax import covariate_matrix
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.compare import random_effects_bms
from shortcut_gym.lab.data.logs import participant_trials, validate_log
from shortcut_gym.lab.fitting import ModelSpec, bic, fit_participant


@pytest.fixture(scope="module")
def one_participant():
    world = make_world()
    spec = ModelSpec("static_softmax", options={"covariates": ["log_exposure", "session"]},
                     fixed={"b_hotkey": -0.5, "b_learn": -2.0, "w_hotkey_log_exposure": 0.6,
                            "w_learn_log_exposure": -0.4, "w_hotkey_session": 0.05, "w_learn_session": -0.05})
    log = validate_log(simulate_log(world, spec, 1, np.random.default_rng(3)), world.commands)
    trials = participant_trials(log, log["participant"].iloc[0])
    ctx = AgentContext(world.commands.n_commands, len(trials), world.commands.names)
    return trials, ctx


def test_static_softmax_equals_statsmodels_mnlogit(one_participant):
    trials, ctx = one_participant
    spec = ModelSpec("static_softmax", options={"covariates": ["log_exposure", "session"]})
    ours = fit_participant(spec, trials, ctx, n_starts=3, seed=0)
    x = covariate_matrix(trials["command"].to_numpy(), trials["session"].to_numpy(), ["log_exposure", "session"])
    y = trials["action"].map({"menu": 0, "hotkey": 1, "learn": 2}).to_numpy()
    ref = sm.MNLogit(y, sm.add_constant(x)).fit(disp=0, maxiter=200)
    assert ours.converged
    assert ours.loglik == pytest.approx(ref.llf, abs=1e-4)
    assert ours.aic == pytest.approx(ref.aic, abs=1e-3)
    assert ours.bic == pytest.approx(ref.bic, abs=1e-3)
    # coefficients: statsmodels params are (1 + covariates) x (hotkey, learn), as our coefficient matrix
    coef = np.array(list(ours.params.values())).reshape(3, 2)
    np.testing.assert_allclose(coef, np.asarray(ref.params), atol=2e-3)


@pytest.mark.parametrize("covariates", [["log_exposure"], ["log_exposure", "session"]])
def test_standard_errors_equal_mnlogit_bse(one_participant, covariates):
    trials, ctx = one_participant
    spec = ModelSpec("static_softmax", options={"covariates": covariates})
    ours = fit_participant(spec, trials, ctx, n_starts=2, seed=1)
    x = covariate_matrix(trials["command"].to_numpy(), trials["session"].to_numpy(), covariates)
    y = trials["action"].map({"menu": 0, "hotkey": 1, "learn": 2}).to_numpy()
    ref = sm.MNLogit(y, sm.add_constant(x)).fit(disp=0, maxiter=200)
    names = list(ours.params)
    se = np.array([ours.se[n] for n in names]).reshape(1 + len(covariates), 2)
    np.testing.assert_allclose(se, np.asarray(ref.bse), rtol=1e-3)
    # Wald intervals: estimate +- 1.96 se for an untransformed parameter
    for n in names:
        assert ours.lower[n] == pytest.approx(ours.params[n] - 1.959964 * ours.se[n], rel=1e-6)
        assert ours.upper[n] == pytest.approx(ours.params[n] + 1.959964 * ours.se[n], rel=1e-6)
    assert ours.fit_ok, ours.fit_issues


def test_bic_formula_schwarz():
    # k ln n - 2 ln L by hand (Schwarz 1978)
    assert bic(-100.0, 3, 50) == pytest.approx(3 * math.log(50) + 200.0)


def _evidence(seed: int, n: int = 15, k: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    lme = rng.normal(scale=3.0, size=(n, k))
    lme[: n // 2, 0] += 4.0
    return lme


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_bms_matches_groupbmc_default_prior(seed):
    lme = _evidence(seed)
    k = lme.shape[1]
    ref = GroupBMC(lme.T, max_iter=100_000, tolerance=1e-12).get_result()
    ours = random_effects_bms(lme, alpha0=1.0 / k)
    # both iterate the same fixed point and stop on a free-energy change; agreement to 1e-4
    np.testing.assert_allclose(ours.expected_frequency, ref.frequency_mean, atol=1e-4)
    np.testing.assert_allclose(ours.exceedance, ref.exceedance_probability, atol=1e-4)
    np.testing.assert_allclose(ours.protected_exceedance, ref.protected_exceedance_probability, atol=1e-4)
    np.testing.assert_allclose(ours.attribution, ref.attribution.T, atol=1e-4)


def test_bms_matches_groupbmc_unit_prior():
    lme = _evidence(5, n=20, k=4)
    ref = GroupBMC(lme.T, **{"\u03b1_0": np.ones(4)}, max_iter=100_000, tolerance=1e-12).get_result()
    ours = random_effects_bms(lme, alpha0=1.0)
    np.testing.assert_allclose(ours.expected_frequency, ref.frequency_mean, atol=1e-4)
    np.testing.assert_allclose(ours.exceedance, ref.exceedance_probability, atol=1e-4)
