"""Fits say when the data cannot tell a parameter from its bound, and never give an empty reason.

The at-bound rule (``lab.fitting.optimise``): a parameter is at a bound when its transformed
coordinate is at the end of its box, or when putting it on a bound (the others held) costs less
than 0.1 nats of ln L (the "near best" line, a project choice). Checked on closed-form
likelihoods and end to end on always-menu participants, whose choice-kernel strength runs
towards its upper bound with a flat likelihood.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from shortcut_gym.agents.base import ParamSpec
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.data.logs import validate_log
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_log
from shortcut_gym.lab.fitting.optimise import (
    NEAR_BEST_NATS,
    _at_bound,
    _cheap_to_bound,
    _optimiser_message,
    free_box,
)
from shortcut_gym.lab.simulate import simulate_agents


@pytest.mark.parametrize(("raw", "expected"), [
    ("ABNORMAL: ", "ABNORMAL: the line search found no better point (the optimiser gave no detail)"),
    ("ABNORMAL:", "ABNORMAL: the line search found no better point (the optimiser gave no detail)"),
    ("", "stopped with no message from the optimiser"),
    (None, "stopped with no message from the optimiser"),
    ("   ", "stopped with no message from the optimiser"),
    ("CONVERGENCE: RELATIVE REDUCTION OF F <= FACTR*EPSMCH", "CONVERGENCE: RELATIVE REDUCTION OF F <= FACTR*EPSMCH"),
    (b"ABNORMAL_TERMINATION_IN_LNSRCH".decode(), "ABNORMAL_TERMINATION_IN_LNSRCH"),
])
def test_optimiser_message_is_never_empty(raw, expected) -> None:
    assert _optimiser_message(raw) == expected


LOGIT = ParamSpec("p", 0.5, 0.0, 50.0, "logit")
LOG = ParamSpec("q", 1.0, 0.0, math.inf, "log")
BOXED = ParamSpec("r", 0.0, -2.0, 3.0, "none")
FREE = ParamSpec("s", 0.0, -math.inf, math.inf, "none")


def _quadratic(centre: float, curvature: float):
    """ln L = -curvature/2 (theta - centre)^2 for a one-parameter model (nats)."""
    return lambda theta: -0.5 * curvature * (float(theta[0]) - centre) ** 2


def _flags(spec: ParamSpec, estimate: float, loglik) -> bool:
    theta = np.array([estimate])
    box = free_box(spec)
    return _at_bound(spec, spec.to_free(estimate), box) or _cheap_to_bound(
        loglik, theta, 0, spec, box, loglik(theta))


@pytest.mark.parametrize(("spec", "estimate", "centre", "curvature", "flagged"), [
    # flat towards the upper bound: 49.0 of 0..50 costs 0.05 nats at 50 (curvature 0.1)
    (LOGIT, 49.0, 49.0, 0.1, True),
    # flat towards the lower bound of a logit parameter
    (LOGIT, 0.5, 0.5, 0.3, True),
    # an interior optimum that the data pin: 25 of 0..50, curvature 1: 312 nats to either bound
    (LOGIT, 25.0, 25.0, 1.0, False),
    # a log-transformed parameter near its floor with a flat likelihood
    (LOG, 0.2, 0.2, 1.0, True),
    # a log-transformed parameter far from its floor (upper side is unbounded: never a bound)
    (LOG, 40.0, 40.0, 0.001, False),
    # an untransformed parameter with a finite box: flat towards 3
    (BOXED, 2.8, 2.8, 1.0, True),
    (BOXED, 0.5, 0.5, 10.0, False),
    # an unbounded parameter is never at a bound, however flat
    (FREE, 0.0, 0.0, 1e-9, False),
])
def test_the_at_bound_rule_follows_the_cost_of_moving_onto_a_bound(spec, estimate, centre, curvature,
                                                                   flagged) -> None:
    loglik = _quadratic(centre, curvature)
    assert _flags(spec, estimate, loglik) is flagged
    # the same rule computed by hand: min over real bounds of ln L(estimate) - ln L(bound) < 0.1
    ends = [b for b in (spec.lower, spec.upper) if math.isfinite(b)]
    by_hand = min((loglik([estimate]) - loglik([b]) for b in ends), default=math.inf) < NEAR_BEST_NATS
    coordinate = _at_bound(spec, spec.to_free(estimate), free_box(spec))
    assert flagged == (by_hand or coordinate)


def test_a_coordinate_at_the_end_of_its_box_is_flagged_even_when_steep() -> None:
    # 50 - 1e-6 of 0..50: logit coordinate ~17.7 > 10, though moving onto 50 costs 0.5 nats
    steep = _quadratic(50.0 - 1e-6, 1e12)
    assert _flags(LOGIT, 50.0 - 1e-6, steep)
    assert not _cheap_to_bound(steep, np.array([50.0 - 1e-6]), 0, LOGIT, free_box(LOGIT),
                               steep([50.0 - 1e-6]))


def test_always_menu_participants_fitted_by_the_choice_kernel_are_flagged_at_a_bound() -> None:
    world = make_world(schedule={"sessions": 3, "trials_per_session": 40, "gap_h": 20.0})
    trials = simulate_agents(world, [{"name": "always_menu"}], [1, 2, 3])
    log = trials.assign(participant=trials["user"].astype(str), command=trials["command_name"])
    log = validate_log(log.drop(columns=["agent", "user"]), world.commands)
    context = context_for(log, world.commands.names, world=world)
    fits = fit_log(log, [ModelSpec("choice_kernel")], context, n_starts=4, seed=2, intervals="none")
    assert len(fits) == 3
    for _, row in fits.iterrows():
        # every choice is the menu: the kernel's strength only has to be large, any large value fits
        assert "beta_ck" in row["at_bound"].split(";"), row[["participant", "param_beta_ck", "at_bound"]]
        assert not row["fit_ok"] and "at a bound" in row["fit_issues"]
        assert row["message"].strip() not in ("", "ABNORMAL:")


def _random_log(counts: dict[str, int]):
    """A one-participant log whose actions are ``counts`` (action -> trials), in blocks."""
    world = make_world(schedule={"sessions": 2, "trials_per_session": 30, "gap_h": 20.0})
    trials = simulate_agents(world, [{"name": "always_menu"}], [1])
    actions = [a for a, k in counts.items() for _ in range(k)]
    trials = trials.iloc[: len(actions)].copy()
    trials["action"] = actions
    trials["outcome"] = trials["action"].map({"menu": "menu", "hotkey": "hotkey", "learn": "learned"})
    log = trials.assign(participant=trials["user"].astype(str), command=trials["command_name"])
    return world, validate_log(log.drop(columns=["agent", "user"]), world.commands)


@pytest.mark.parametrize("counts", [
    {"hotkey": 40, "learn": 20},            # no menu: the optimum is on p_hotkey + p_learn = 1
    {"menu": 5, "hotkey": 45, "learn": 10},  # near that edge: a bound move is infeasible
    {"menu": 30, "hotkey": 20, "learn": 10},  # interior
])
def test_random_model_fits_reach_the_multinomial_optimum_across_its_infeasible_region(counts) -> None:
    # The random model refuses p_hotkey + p_learn > 1; neither the search nor the at-bound check
    # may stop on that refusal. Its ln L has the closed form sum_a n_a ln(n_a / n) (multinomial ML).
    world, log = _random_log(counts)
    context = context_for(log, world.commands.names, world=world)
    fits = fit_log(log, [ModelSpec("random")], context, n_starts=3, seed=1, intervals="none")
    n = sum(counts.values())
    truth = sum(k * math.log(k / n) for k in counts.values())
    row = fits.iloc[0]
    assert row["loglik"] <= truth + 1e-9
    assert row["loglik"] >= truth - 0.05, (row["loglik"], truth)
    assert row["param_p_hotkey"] + row["param_p_learn"] <= 1.0 + 1e-12
    assert row["param_p_hotkey"] == pytest.approx(counts["hotkey"] / n, abs=0.02)


def test_a_fixed_value_the_model_refuses_still_raises_its_error() -> None:
    world, log = _random_log({"menu": 30, "hotkey": 20, "learn": 10})
    context = context_for(log, world.commands.names, world=world)
    with pytest.raises(Exception, match="exceeds 1"):
        fit_log(log, [ModelSpec("random", fixed={"p_hotkey": 0.8, "p_learn": 0.7})], context, n_starts=1,
                intervals="none")


# ---- the threshold itself, the others held, plateaus, non-finite bounds: closed forms ------------

#: The rule's stated line (nats), written out so that a change of the fitter's constant fails here.
LINE_NATS = 0.1
LOGIT_01 = ParamSpec("rate", 0.5, 0.0, 1.0, "logit")
LOG_2 = ParamSpec("floor", 3.0, 2.0, math.inf, "log")


def _gaussian_cost(s: ParamSpec, mu: float, sd: float) -> float:
    """Closed form: ln L lost moving a Gaussian-likelihood parameter from its optimum mu onto the
    cheapest bound (a log transform: its lower bound; otherwise each finite bound)."""
    tried = [s.lower] if s.transform == "log" else [b for b in (s.lower, s.upper) if math.isfinite(b)]
    return min(0.5 * ((b - mu) / sd) ** 2 for b in tried)


STRADDLE = [  # pairs on either side of 0.1 nats (closed-form cost in the comment), every bounded kind
    (LOGIT_01, 0.9, 0.3), (LOGIT_01, 0.9, 0.2),      # upper end: 0.056 / 0.125
    (LOGIT_01, 0.08, 0.3), (LOGIT_01, 0.08, 0.1),    # lower end: 0.036 / 0.32
    (LOGIT, 49.0, 2.5), (LOGIT, 49.0, 2.0),          # 0..50 upper: 0.08 / 0.125
    (LOGIT, 1.0, 2.5), (LOGIT, 1.0, 2.0),            # 0..50 lower: 0.08 / 0.125
    (LOG, 0.05, 0.2), (LOG, 0.05, 0.1),              # floor 0: 0.031 / 0.125
    (LOG_2, 2.1, 0.5), (LOG_2, 2.6, 0.5),            # floor 2: 0.02 / 0.72
    (BOXED, 2.8, 0.5), (BOXED, 2.8, 0.4),            # box upper: 0.08 / 0.125
    (BOXED, -1.9, 0.25), (BOXED, -1.9, 0.2),         # box lower: 0.08 / 0.125
]


@pytest.mark.parametrize(("spec", "mu", "sd"), STRADDLE, ids=[f"{s.name}-{m}-{d}" for s, m, d in STRADDLE])
def test_the_line_is_at_a_tenth_of_a_nat_for_every_kind_of_bound(spec: ParamSpec, mu: float, sd: float) -> None:
    """ln L = -(theta - mu)^2 / (2 sd^2) at its optimum mu, coordinate far from the box's end:
    flagged iff the closed-form cost of the cheapest bound is < 0.1 nats; each pair straddles it."""
    def loglik(theta) -> float:
        return -0.5 * ((float(theta[0]) - mu) / sd) ** 2

    assert abs(spec.to_free(mu)) < 10.0
    assert _flags(spec, mu, loglik) is (_gaussian_cost(spec, mu, sd) < LINE_NATS)


def test_the_straddling_pairs_fall_on_both_sides_of_the_line() -> None:
    """Guard on the table above: each pair has one case under 0.1 nats and one over it."""
    for first, second in zip(STRADDLE[::2], STRADDLE[1::2], strict=True):
        assert _gaussian_cost(*first) < LINE_NATS < _gaussian_cost(*second), (first, second)


def test_the_others_are_held_at_the_estimate_not_refitted() -> None:
    """Correlated Gaussian (correlation 0.95): with the other parameter held at its estimate,
    moving the first 0.3 onto its lower bound costs 0.5 d^2 P_11 = 0.46 nats (not flagged),
    though refitting the other would cost only 0.5 d^2 / Sigma_11 = 0.045 nats."""
    mu = np.array([0.3, 0.0])
    cov = np.array([[1.0, 0.95], [0.95, 1.0]])
    prec = np.linalg.inv(cov)

    def loglik(theta) -> float:
        d = np.asarray(theta, dtype=float) - mu
        return -0.5 * float(d @ prec @ d)

    a, b = ParamSpec("a", 0.5, 0.0, 5.0, "logit"), ParamSpec("b", 0.0, -20.0, 20.0, "logit")
    assert 0.5 * 0.09 * prec[0, 0] > LINE_NATS > 0.5 * 0.09 / cov[0, 0]
    assert not _cheap_to_bound(loglik, mu.copy(), 0, a, free_box(a), loglik(mu))
    assert not _cheap_to_bound(loglik, mu.copy(), 1, b, free_box(b), loglik(mu))
    # and with no correlation the same move costs 0.045 nats: flagged
    assert _cheap_to_bound(lambda t: -0.5 * float(np.sum((np.asarray(t) - mu) ** 2)), mu.copy(), 0, a, free_box(a),
                           0.0)


def test_a_plateau_towards_a_bound_is_flagged_though_the_coordinate_is_not_extreme() -> None:
    """ln L = -5 exp(-w) rises to a plateau as the weight w grows (as a choice-kernel weight does
    on data that never vary): at w = 24.9 of 0..50 (logit coordinate -0.008) or 49.99 the upper
    bound gains 5 (e^-w - e^-50) nats; a rising ln L is never an interior optimum."""
    def loglik(theta) -> float:
        return -5.0 * math.exp(-float(theta[0]))

    assert abs(LOGIT.to_free(24.9)) < 0.01
    for w in (24.9, 49.99, 2.0):
        assert not _at_bound(LOGIT, LOGIT.to_free(w), free_box(LOGIT))  # coordinate <= 8.5
        assert _flags(LOGIT, w, loglik), w


def test_a_bound_where_ln_l_is_not_finite_is_never_cheap() -> None:
    """ln L = -inf on and next to the lower bound (a rate that must be positive for the data), and
    steep towards any upper one: the lower bound is no cheap alternative to an estimate, however
    flat ln L is near it (0.01 ln v: from 0.001 to 1e-6 it falls only 0.07 nats)."""
    def loglik(theta) -> float:
        v = float(theta[0])
        return 0.01 * math.log(v) - 100.0 * v**2 if v > 1e-6 else -math.inf

    for spec, estimate in ((LOG, 0.001), (LOGIT_01, 0.001), (BOXED, 0.5)):
        shifted = ParamSpec(spec.name, 0.5, 0.0, spec.upper, spec.transform)
        theta = np.array([estimate])
        assert not _cheap_to_bound(loglik, theta, 0, shifted, free_box(shifted), loglik(theta)), spec.name


# ---- end to end, against the closed form of the choice kernel on always-menu data ----------------

def _menu_loglik(alpha: float, beta: float, n: int) -> float:
    """Closed form of the choice kernel's ln L on n trials that all chose the menu, 3 actions
    (menu, hotkey, learn): K_t[menu] = 1 - (1 - alpha)^t, the others stay 0, so
    P_t(menu) = 1 / (1 + 2 exp(-beta K_t[menu])); the first trial is uniform."""
    return -math.log(3.0) - sum(math.log1p(2.0 * math.exp(-beta * (1.0 - (1.0 - alpha) ** t))) for t in range(1, n))


def test_always_menu_fits_match_the_closed_form_and_their_weight_gets_no_standard_error() -> None:
    """The fitted ln L equals the closed form, beta_ck on its bound 50 costs < 0.1 nats by that
    closed form, and the flagged beta_ck gets no standard error and no Wald interval."""
    from shortcut_gym.agents.registry import make_agent
    from shortcut_gym.lab.checks.predictive import simulate_log

    world = make_world(schedule={"sessions": 3, "trials_per_session": 30, "gap_h": 20.0})
    log = validate_log(simulate_log(world, make_agent("always_menu"), 3, np.random.default_rng(4)), world.commands)
    assert (log["action"] == "menu").all()
    fits = fit_log(log, [ModelSpec("choice_kernel")], context_for(log, world.commands.names), n_starts=3, seed=2)
    n = len(log) // 3
    for _, r in fits.iterrows():
        a, b = r["param_alpha_ck"], r["param_beta_ck"]
        assert r["loglik"] == pytest.approx(_menu_loglik(a, b, n), abs=1e-9)
        assert r["loglik"] - _menu_loglik(a, 50.0, n) < LINE_NATS
        assert "beta_ck" in r["at_bound"].split(";") and not r["fit_ok"], r.to_dict()
        assert math.isnan(r["se_beta_ck"]) and math.isnan(r["lower_beta_ck"]) and math.isnan(r["upper_beta_ck"])
