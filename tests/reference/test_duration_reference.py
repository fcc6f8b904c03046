"""Reference checks of the participant duration fit (lab/fitting/durations.py).

* Keystroke-Level Model additivity: Card, Moran & Newell (1980), "The keystroke-level model for
  user performance time with interactive systems", CACM 23(7): a trial's time is the sum of its
  operators, so with Gaussian noise and the operator counts of every trial known, the maximum
  likelihood operator times are the ordinary least-squares regression of the durations (less the
  held terms) on the counts. Reference: statsmodels OLS (Seabold & Perktold 2010, "statsmodels:
  Econometric and statistical modeling with Python"). The counts come from the simulator's own
  per-operator time breakdown, not from the code under test.
* Lognormal density: scipy.stats.lognorm (shape s = sigma, scale = e^mu; Virtanen et al. 2020,
  "SciPy 1.0", Nature Methods 17).
* Recovery on synthetic participants with known operator times (Wilson & Collins 2019, eLife 8,
  "Ten simple rules for the computational modeling of behavioral data", rule 6). Thresholds for
  K and the encoding time are the issue's (0.9); those of the others are set below what this
  design reaches and are ours (measured with these seeds over 14 participants: K 0.99,
  encoding 1.00, M 0.97, P 0.93, H 0.96, F 0.99).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from shortcut_gym.agents import make_agent, run_episode
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import log_from_simulation, participant_trials, validate_log
from shortcut_gym.lab.fitting.durations import (
    DURATION_PARAMETERS,
    base_values,
    fit_durations,
    implied_world,
    lognormal_logpdf,
    operator_design,
    sigma_of_cv,
)

#: t_<operator> breakdown column of the simulator -> fitted operator
_BREAKDOWN = {"M": "mental_s", "K": "keystroke_s", "P": "point_s", "H": "home_s", "encoding": "encoding_s",
              "retrieval": "latency_factor_s"}


@pytest.fixture(scope="module")
def simulated():
    world = implied_world(make_world(schedule={"sessions": 4, "trials_per_session": 60}),
                          {"keystroke_s": 0.31, "encoding_s": 2.2, "mental_s": 1.1})
    rows = run_episode(CommandSelectionEnv(world=world), make_agent("random", p_hotkey=0.5, p_learn=0.2), seed=4)
    log = validate_log(log_from_simulation(rows.assign(user=0), world.commands), world.commands)
    return world, rows, participant_trials(log, log["participant"].iloc[0])


def test_gaussian_fit_equals_statsmodels_ols_on_known_operator_counts(simulated):
    world, rows, trials = simulated
    truth = dict(zip(DURATION_PARAMETERS, base_values(world), strict=True))
    counts = np.column_stack([rows[f"t_{op}"].to_numpy() / truth[name] for op, name in _BREAKDOWN.items()])
    held = rows[["t_B", "t_search", "t_decision", "t_pointing"]].sum(axis=1).to_numpy()
    noisy = trials["duration_s"].to_numpy() + np.random.default_rng(0).normal(0.0, 0.4, len(trials))
    ref = sm.OLS(noisy - held, counts).fit()
    ours = fit_durations(trials.assign(duration_s=noisy), world, noise="gaussian")
    order = list(_BREAKDOWN.values())
    np.testing.assert_allclose([ours.estimates[n] for n in order], ref.params, rtol=0, atol=1e-6)
    np.testing.assert_allclose([ours.standard_errors[n] for n in order], ref.bse, rtol=0, atol=1e-6)
    assert ours.loglik == pytest.approx(ref.llf, abs=1e-6)


def test_design_reproduces_noise_free_durations_exactly(simulated):
    world, _, trials = simulated
    design = operator_design(trials, world)
    np.testing.assert_allclose(design.predicted_s(base_values(world)), trials["duration_s"], rtol=0, atol=1e-9)


@pytest.mark.parametrize(("mean", "cv"), [(0.5, 0.05), (2.0, 0.3), (7.5, 1.2)])
def test_lognormal_logdensity_equals_scipy(mean, cv):
    sigma = sigma_of_cv(cv)
    d = np.array([0.01, 0.3, 1.0, 2.5, 9.0, 40.0])
    ref = stats.lognorm(s=sigma, scale=mean * np.exp(-0.5 * sigma ** 2))
    np.testing.assert_allclose(lognormal_logpdf(d, np.full(len(d), mean), sigma), ref.logpdf(d), rtol=1e-12)
    assert ref.mean() == pytest.approx(mean, rel=1e-12)
    assert ref.std() / ref.mean() == pytest.approx(cv, rel=1e-12)


def test_lognormal_fit_reaches_the_likelihood_at_the_truth(simulated):
    world, _, trials = simulated
    rng = np.random.default_rng(1)
    sigma = sigma_of_cv(0.2)
    noisy = trials["duration_s"].to_numpy() * np.exp(rng.normal(-0.5 * sigma ** 2, sigma, len(trials)))
    fit = fit_durations(trials.assign(duration_s=noisy), make_world(schedule={"sessions": 4, "trials_per_session": 60}))
    at_truth = lognormal_logpdf(noisy, operator_design(trials, world).predicted_s(base_values(world)), sigma).sum()
    assert fit.loglik >= at_truth - 1e-9
    assert all(fit.identified.values())
    true = dict(zip(DURATION_PARAMETERS, base_values(world), strict=True))
    for name in DURATION_PARAMETERS:  # within 4 standard errors of the truth
        assert abs(fit.estimates[name] - true[name]) < 4 * fit.standard_errors[name]


def test_operator_times_are_recovered_across_participants():
    base = make_world()
    rng = np.random.default_rng(5)
    sigma = sigma_of_cv(0.1)
    truth, est = [], []
    for _ in range(14):
        th = {"mental_s": rng.uniform(0.8, 1.8), "keystroke_s": rng.uniform(0.08, 0.8),
              "point_s": rng.uniform(0.7, 1.5), "home_s": rng.uniform(0.2, 0.7), "encoding_s": rng.uniform(0.5, 3.0),
              "latency_factor_s": rng.uniform(0.02, 0.1)}
        world = implied_world(base, th)
        log = validate_log(simulate_log(world, make_agent("random", p_hotkey=0.5, p_learn=0.25), 1, rng),
                           world.commands)
        trials = participant_trials(log, log["participant"].iloc[0])
        noise = np.exp(rng.normal(-0.5 * sigma ** 2, sigma, len(trials)))
        trials = trials.assign(duration_s=trials["duration_s"] * noise)
        fit = fit_durations(trials, base)
        truth.append([th[n] for n in DURATION_PARAMETERS])
        est.append([fit.estimates[n] for n in DURATION_PARAMETERS])
    truth_a, est_a = np.array(truth), np.array(est)
    r = {n: np.corrcoef(truth_a[:, j], est_a[:, j])[0, 1] for j, n in enumerate(DURATION_PARAMETERS)}
    assert r["keystroke_s"] >= 0.9
    assert r["encoding_s"] >= 0.9
    assert r["mental_s"] >= 0.8 and r["point_s"] >= 0.8 and r["home_s"] >= 0.85 and r["latency_factor_s"] >= 0.9
