"""Exceedance probabilities and the omnibus risk against closed forms and Monte Carlo.

* Two models: r_1 ~ Beta(alpha_1, alpha_2), so P(r_1 > r_2) = P(r_1 > 1/2), the Beta survival
  function at 1/2 (scipy.stats.beta; Stephan et al. 2009, "Bayesian model selection for group
  studies", NeuroImage 46(4), eq. 16 defines the exceedance probability).
* Three and five models: the share of 10^6 Dirichlet draws in which each model is the largest,
  within 5 binomial standard errors.
* The omnibus risk: with equal evidence for every model and participant, p(Y | H1) = p(Y | H0) (the
  data say nothing about the frequencies), so the exact P(H0 | Y) is 1/2; Rigoux et al. (2014),
  "Bayesian model selection for group studies - revisited", NeuroImage 84, eq. 6 defines the
  BOR. The exact evidence is also checked against brute-force enumeration of model assignments
  and against a Monte Carlo average over the Dirichlet prior.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats
from scipy.special import gammaln, logsumexp

from shortcut_gym.lab.compare import (
    dirichlet_exceedance,
    exact_omnibus_risk,
    exceedance_integral,
    exceedance_monte_carlo,
    random_effects_bms,
)
from shortcut_gym.lab.compare.exceedance import exact_log_evidence_h1

PAIRS = [(520.0, 500.0), (5050.0, 5000.0), (10_000.0, 9_900.0), (10_000.0, 10_000.0), (150.0, 160.0),
         (300.0, 301.0), (1.0, 10_000.0), (2.5, 1.5), (0.5, 0.7), (0.05, 0.02), (1_000.0, 1.0), (9_999.0, 10_000.0)]


@pytest.mark.parametrize("alpha", PAIRS)
def test_two_models_equal_the_beta_survival_function(alpha):
    exact = stats.beta.sf(0.5, alpha[0], alpha[1])
    for values in (dirichlet_exceedance(np.array(alpha)), exceedance_integral(np.array(alpha))):
        assert np.isfinite(values).all()
        assert values[0] == pytest.approx(exact, abs=1e-8)
        assert values.sum() == pytest.approx(1.0, abs=1e-12)


def test_issue_example_counts():
    # Beta(520, 500): P(r_1 > 1/2) = 0.7345 (four decimals of the Beta cdf)
    assert dirichlet_exceedance(np.array([520.0, 500.0]))[0] == pytest.approx(0.7345, abs=5e-5)
    assert np.isfinite(dirichlet_exceedance(np.array([5050.0, 5000.0]))).all()


MANY = [
    (3.0, 2.0, 1.0),
    (300.0, 310.0, 290.0),
    (0.2, 0.3, 0.1),
    (5000.0, 5050.0, 4990.0),
    (10_000.0, 1.0, 9_950.0),
    (5000.0, 5050.0, 4990.0, 10.0, 1.0),
    (0.2, 0.3, 0.1, 0.5, 0.4),
    (2000.0, 2020.0, 1990.0, 2010.0, 1980.0),
    (1.0, 1.0, 1.0, 1.0, 1.0),
    (40.0, 3.0, 38.0, 39.0, 1.5),
]


@pytest.mark.parametrize("alpha", MANY)
def test_more_models_match_a_million_dirichlet_draws(alpha):
    a = np.array(alpha)
    ours = exceedance_integral(a)
    draws = 1_000_000
    mc, _ = exceedance_monte_carlo(a, draws, np.random.default_rng(sum(map(int, alpha))))
    assert np.isfinite(ours).all() and ours.sum() == pytest.approx(1.0, abs=1e-12)
    se = np.sqrt(np.maximum(ours * (1 - ours), 1.0 / draws) / draws)
    np.testing.assert_array_less(np.abs(ours - mc), 5 * se)
    if len(set(alpha)) == 1:
        np.testing.assert_allclose(ours, 1.0 / len(a), atol=1e-9)


def test_monte_carlo_reports_its_standard_error_and_is_seeded():
    a = np.array([3.0, 2.0, 1.0])
    p1, se1 = exceedance_monte_carlo(a, 10_000, np.random.default_rng(1))
    p2, _ = exceedance_monte_carlo(a, 10_000, np.random.default_rng(1))
    np.testing.assert_array_equal(p1, p2)
    np.testing.assert_allclose(se1, np.sqrt(p1 * (1 - p1) / 10_000))


@pytest.mark.parametrize("n", [300, 2_000, 10_000])
@pytest.mark.parametrize("k", [2, 3, 5])
def test_bms_exceedance_never_nan_for_large_groups(n, k):
    rng = np.random.default_rng(n + k)
    lme = rng.normal(scale=2.0, size=(n, k))
    lme[:, 0] += 0.05  # a slight lead for model 0, so the counts stay close
    res = random_effects_bms(lme)
    assert np.isfinite(res.exceedance).all() and np.isfinite(res.protected_exceedance).all()
    assert res.exceedance.sum() == pytest.approx(1.0, abs=1e-9)
    if k == 2:
        assert res.exceedance[0] == pytest.approx(stats.beta.sf(0.5, *res.alpha), abs=1e-9)
    else:
        mc, _ = exceedance_monte_carlo(res.alpha, 200_000, np.random.default_rng(0))
        np.testing.assert_allclose(res.exceedance, mc, atol=5 * math.sqrt(0.25 / 200_000))


@pytest.mark.parametrize("n", [1, 3, 10])
@pytest.mark.parametrize("k", [2, 3])
def test_exact_omnibus_risk_is_one_half_with_equal_evidence(n, k):
    lme = np.full((n, k), -12.3)
    assert exact_omnibus_risk(lme) == pytest.approx(0.5, abs=1e-12)


def test_variational_omnibus_risk_is_inflated_for_three_participants():
    # the documented caveat: 0.63 (variational) against 0.50 (exact) for 3 participants, 2 models
    res = random_effects_bms(np.zeros((3, 2)))
    assert res.bor == pytest.approx(0.629, abs=2e-3)
    assert res.bor_exact == pytest.approx(0.5, abs=1e-12)


def _brute_force_log_evidence(lme: np.ndarray, a0: np.ndarray) -> float:
    n, k = lme.shape
    terms = []
    for assign in itertools.product(range(k), repeat=n):
        counts = np.bincount(assign, minlength=k)
        log_moment = (gammaln(a0 + counts).sum() - gammaln(a0.sum() + n)) - (gammaln(a0).sum() - gammaln(a0.sum()))
        terms.append(lme[np.arange(n), assign].sum() + log_moment)
    return float(logsumexp(terms))


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_exact_evidence_equals_enumeration_and_monte_carlo(seed):
    rng = np.random.default_rng(seed)
    lme = rng.normal(scale=2.0, size=(6, 3)) - 50.0
    a0 = np.array([1.0, 0.5, 2.0])
    exact = exact_log_evidence_h1(lme, a0)
    assert exact == pytest.approx(_brute_force_log_evidence(lme, a0), abs=1e-9)
    r = rng.dirichlet(a0, size=400_000)
    shift = lme.max(axis=1, keepdims=True)
    per_draw = np.log(r @ np.exp(lme - shift).T).sum(axis=1) + shift.sum()
    mc = float(logsumexp(per_draw) - math.log(len(r)))
    weights = np.exp(per_draw - per_draw.max())
    rel_se = weights.std() / weights.mean() / math.sqrt(len(r))
    assert abs(exact - mc) < 5 * rel_se + 1e-6


def test_bad_dirichlet_parameters_are_named():
    with pytest.raises(ValueError, match="> 0"):
        dirichlet_exceedance(np.array([1.0, -2.0]))
    with pytest.raises(ValueError, match=">= 2 values"):
        dirichlet_exceedance(np.array([1.0]))
    with pytest.raises(ValueError, match="draws"):
        exceedance_monte_carlo(np.array([1.0, 2.0]), 0, np.random.default_rng(0))
