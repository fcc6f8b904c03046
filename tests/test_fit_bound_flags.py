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
