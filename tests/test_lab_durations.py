"""The participant duration fit: its inputs, identifiability and the world it implies."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import participant_trials, validate_log
from shortcut_gym.lab.fitting.durations import (
    DurationFitError,
    fit_durations,
    fit_log_durations,
    implied_world,
    operator_design,
)


@pytest.fixture(scope="module")
def world():
    return make_world(schedule={"sessions": 2, "trials_per_session": 60})


def _log(world, agent, n=1, seed=0):
    return validate_log(simulate_log(world, agent, n, np.random.default_rng(seed)), world.commands)


def test_operator_without_trials_is_not_identified_and_keeps_the_base_value(world):
    log = _log(world, make_agent("random", p_hotkey=0.5, p_learn=0.0))
    fit = fit_durations(participant_trials(log, log["participant"].iloc[0]), world)
    assert not fit.identified["encoding_s"]
    assert fit.estimates["encoding_s"] == world.costs.learn.encoding_s
    assert math.isnan(fit.standard_errors["encoding_s"])
    assert fit.identified["keystroke_s"] and fit.n_params == 6


def test_noise_free_durations_give_the_true_operator_times(world):
    truth = {"keystroke_s": 0.5, "home_s": 0.25, "encoding_s": 2.5, "latency_factor_s": 0.08, "point_s": 0.9,
             "mental_s": 1.6}
    w = implied_world(world, truth)
    log = _log(w, make_agent("random", p_hotkey=0.5, p_learn=0.25), seed=2)
    fit = fit_durations(participant_trials(log, log["participant"].iloc[0]), world, noise="gaussian")
    for name, value in truth.items():
        assert fit.estimates[name] == pytest.approx(value, abs=1e-9)
    assert fit.world.costs.klm.k_s == pytest.approx(0.5) and fit.world.memory.latency_factor_s == pytest.approx(0.08)


def test_wrong_hotkey_counts_two_mental_steps_the_undo_keys_and_two_homings(world):
    log = _log(world, make_agent("always_hotkey"), seed=1)
    trials = participant_trials(log, log["participant"].iloc[0])
    design = operator_design(trials, world)
    wrong = np.flatnonzero(trials["outcome"].to_numpy() == "hotkey_wrong")
    assert len(wrong) > 0
    keys = world.command_constants()[trials["command"].to_numpy()[wrong], 3]
    np.testing.assert_array_equal(design.counts[wrong, 0], 2.0)
    np.testing.assert_array_equal(design.counts[wrong, 1], keys + world.costs.errors.undo_keystrokes)
    assert set(design.counts[wrong, 3]) <= {1.0, 2.0}


def test_zero_duration_is_refused_by_the_lognormal_fit_naming_participant_and_trial(world):
    log = _log(world, make_agent("always_menu"))
    trials = participant_trials(log, log["participant"].iloc[0])
    trials.loc[7, "duration_s"] = 0.0
    with pytest.raises(DurationFitError, match=r"participant 'p9', trial 7: duration_s 0.0"):
        fit_durations(trials, world, participant="p9")
    fit_durations(trials, world, noise="gaussian")  # a zero is a valid gaussian observation


def test_bad_noise_and_unknown_operator_are_refused(world):
    log = _log(world, make_agent("always_menu"))
    with pytest.raises(DurationFitError, match="noise must be"):
        fit_durations(participant_trials(log, log["participant"].iloc[0]), world, noise="normal")  # type: ignore[arg-type]
    with pytest.raises(DurationFitError, match="unknown operator"):
        implied_world(world, {"typing_s": 0.2})


def test_fit_log_durations_gives_one_row_and_one_world_per_participant(world):
    log = _log(world, make_agent("random"), n=3)
    table, worlds = fit_log_durations(log, world)
    assert list(table["participant"]) == list(worlds) == ["sim-0", "sim-1", "sim-2"]
    assert {"keystroke_s", "se_keystroke_s", "cv", "loglik"} <= set(table.columns)
    for pid, w in worlds.items():
        assert w.costs.klm.k_s == pytest.approx(table.set_index("participant").loc[pid, "keystroke_s"])


def test_an_operator_in_fixed_proportion_to_an_earlier_one_is_held(world):
    log = _log(world, make_agent("always_menu"))  # every trial M + P (+ H): P is not separable from M
    fit = fit_durations(participant_trials(log, log["participant"].iloc[0]), world)
    assert fit.identified["mental_s"] and not fit.identified["point_s"]
    assert fit.estimates["point_s"] == world.costs.klm.point_s
    assert fit.estimates["mental_s"] == pytest.approx(world.costs.klm.mental_s, rel=1e-6)


def test_the_group_fit_shrinks_keystroke_times_toward_the_truth_and_fills_unidentified_operators():
    from shortcut_gym.lab.fitting.durations_group import fit_durations_hierarchical

    base = make_world(schedule={"sessions": 2, "trials_per_session": 40}, costs={"noise": {"cv": 0.15}})
    rng = np.random.default_rng(2)
    frames, truth = [], []
    for i in range(8):
        k_s, enc = rng.uniform(0.1, 0.6), rng.uniform(0.8, 2.5)
        w = implied_world(base, {"keystroke_s": k_s, "encoding_s": enc})
        agent = make_agent("random", p_hotkey=0.5, p_learn=0.1 if i % 2 else 0.0)
        frames.append(simulate_log(w, agent, 1, rng, prefix=f"p{i}"))
        truth.append(k_s)
    log = validate_log(pd.concat(frames, ignore_index=True), base.commands)
    em, table, worlds = fit_durations_hierarchical(log, base)
    assert em.converged and len(worlds) == 8
    ml = np.array([fit_durations(participant_trials(log, p), base).estimates["keystroke_s"]
                   for p in table["participant"]])
    err_group = np.mean((table["keystroke_s"].to_numpy() - truth) ** 2)
    err_ml = np.mean((ml - truth) ** 2)
    assert err_group < err_ml
    no_learn = table["encoding_s"].to_numpy()[0::2]  # participants without a learn trial
    assert np.allclose(no_learn, no_learn[0], rtol=1e-3) and abs(no_learn[0] - base.costs.learn.encoding_s) > 0.05


def _pushed_below_zero(world, keystroke_s: float):
    """A random participant's log whose durations are the noise-free times of operator values with
    ``keystroke_s`` (may be negative: the data then push K below zero), plus small Gaussian noise."""
    log = _log(world, make_agent("random", p_hotkey=0.5, p_learn=0.25), seed=4)
    trials = participant_trials(log, log["participant"].iloc[0])
    design = operator_design(trials, world)
    theta = np.array([1.4, keystroke_s, 1.1, 0.4, 2.0, 0.07])  # DURATION_PARAMETERS order
    d = design.predicted_s(theta) + np.random.default_rng(0).normal(0.0, 0.05, len(trials))
    assert d.min() > 0
    return trials.assign(duration_s=d), design, d


@pytest.mark.parametrize("keystroke_s", [-0.2, -0.02])
def test_operators_the_data_push_below_zero_sit_on_the_floor_at_the_constrained_optimum(world, keystroke_s):
    from shortcut_gym.lab.fitting.durations import DURATION_PARAMETERS, MIN_OPERATOR_S

    trials, design, d = _pushed_below_zero(world, keystroke_s)
    fit = fit_durations(trials, world, noise="gaussian", participant="P-neg")
    assert fit.at_floor == ("keystroke_s",)
    assert fit.estimates["keystroke_s"] == MIN_OPERATOR_S and math.isnan(fit.standard_errors["keystroke_s"])
    assert all(np.isfinite(fit.standard_errors[n]) for n in DURATION_PARAMETERS if n != "keystroke_s")
    assert fit.world.costs.klm.keystroke_s == MIN_OPERATOR_S  # a valid world: the yardstick can plan for it
    assert fit.row()["at_floor"] == "keystroke_s"

    # independent check: the sum of squares under b >= floor, minimised by a generic bounded optimiser
    theta = np.array([fit.estimates[n] for n in DURATION_PARAMETERS])

    def ssr(b):
        r = d - design.predicted_s(b)
        return float(r @ r)

    other = optimize_bounded(ssr, theta + 0.3, MIN_OPERATOR_S)
    assert ssr(theta) <= ssr(other) + 1e-9
    # KKT: on the floor the sum of squares rises as K rises; every other operator is stationary
    grad = -2 * design.counts.T @ (d - design.predicted_s(theta))
    assert grad[1] >= 0
    assert np.allclose(np.delete(grad, 1), 0.0, atol=1e-6 * len(d))
    # the Gaussian ln L is that of the residuals at the maximum-likelihood sigma
    r = d - design.predicted_s(theta)
    sigma = math.sqrt(float(r @ r) / len(d))
    assert fit.sigma == pytest.approx(sigma, rel=1e-12)
    assert fit.loglik == pytest.approx(float(np.sum(-0.5 * np.log(2 * np.pi * sigma ** 2) - r ** 2 / (2 * sigma ** 2))),
                                       rel=1e-12)

    lognormal = fit_durations(trials, world, noise="lognormal", participant="P-neg")
    assert lognormal.at_floor == ("keystroke_s",) and math.isnan(lognormal.standard_errors["keystroke_s"])


def test_an_operator_above_the_floor_is_not_flagged_and_the_fit_is_plain_least_squares(world):
    trials, design, d = _pushed_below_zero(world, 0.3)
    fit = fit_durations(trials, world, noise="gaussian")
    assert fit.at_floor == () and fit.row()["at_floor"] == ""
    ols, *_ = np.linalg.lstsq(design.counts, d - design.offset_s, rcond=None)
    assert fit.estimates["keystroke_s"] == pytest.approx(ols[1], rel=1e-10)


def optimize_bounded(f, x0, lower):
    from scipy import optimize

    return optimize.minimize(f, x0, method="Powell", bounds=[(lower, None)] * len(x0),
                             options={"xtol": 1e-12, "ftol": 1e-14, "maxfev": 200000}).x
