"""Maximum-likelihood (and MAP) fit of one model to one participant, with its diagnostics.

The optimiser (scipy.optimize.minimize, L-BFGS-B) works on unbounded coordinates given by each
parameter's transform (logit for two-sided bounds, log for lower bounds), on the *mean* negative
log-likelihood per trial (same optimum as the sum; with the sum, the first quasi-Newton step,
taken before any curvature is known, is as long as the gradient, hundreds of units, and lands in
a corner of the box where the likelihood is flat and the gradient vanishes).

Starts: the defaults, then draws over each parameter's plausible range (:mod:`.starts`), plus any
warm starts (e.g. a nested model's fit, :mod:`.nesting`). A best solution at a bound or not
converged triggers a restart (as many fresh starts again) and a derivative-free polish
(Nelder-Mead, then L-BFGS-B again). Each fit reports the starts within 0.1 nats of the best, the
parameters at a bound, standard errors and intervals (:mod:`.uncertainty`), and ``fit_ok`` with
the reasons when it is doubtful.
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize
from threadpoolctl import threadpool_limits

from shortcut_gym.agents.base import AgentContext, ParamSpec
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.fitting.criteria import aic, bic
from shortcut_gym.lab.fitting.replay import loglik_function
from shortcut_gym.lab.fitting.specs import ModelSpec
from shortcut_gym.lab.fitting.starts import check_ranges, draw_in_range
from shortcut_gym.lab.fitting.uncertainty import INTERVAL_METHODS, Z95, profile_interval, transformed_sd

#: Half-width of the box L-BFGS-B keeps transformed coordinates in (logit 30 ~ 1e-13 from a bound).
FREE_LIMIT = 30.0
#: Box for unbounded ('none', infinite bounds) parameters, in natural units.
UNBOUNDED_LIMIT = 50.0
#: A transformed coordinate beyond this is "at a bound" (logit 10: within 4.5e-5 of the range's end;
#: an assumption of this project).
AT_BOUND_FREE = 10.0
#: Starts whose ln L is within this of the best count as agreeing with it (nats).
NEAR_BEST_NATS = 0.1


@contextlib.contextmanager
def single_threaded_blas() -> Iterator[None]:
    """Run the block with every loaded BLAS on one thread (threadpoolctl), then restore.

    L-BFGS-B calls BLAS on vectors of a handful of entries; waking OpenBLAS's worker threads for
    them costs more than the whole fit on busy cores.
    """
    with threadpool_limits(limits=1, user_api="blas"):
        yield


@dataclass
class FitResult:
    """Best fit of one model to one participant."""

    participant: str
    model: str
    params: dict[str, float]
    loglik: float
    n_params: int
    n_trials: int
    converged: bool
    message: str
    n_starts: int
    starts_at_best: int
    log_posterior: float | None = None
    fast_path: bool = True
    starts_near_best: int = 0
    at_bound: tuple[str, ...] = ()
    fit_ok: bool = True
    fit_issues: tuple[str, ...] = ()
    se: dict[str, float] = field(default_factory=dict)
    lower: dict[str, float] = field(default_factory=dict)
    upper: dict[str, float] = field(default_factory=dict)
    interval_method: str = "wald"
    polished: bool = False

    @property
    def aic(self) -> float:
        """2k - 2 ln L."""
        return aic(self.loglik, self.n_params)

    @property
    def bic(self) -> float:
        """k ln n - 2 ln L."""
        return bic(self.loglik, self.n_params, self.n_trials)

    def row(self) -> dict[str, Any]:
        """One tidy row: identifiers, fit figures, ``param_<name>`` columns."""
        out: dict[str, Any] = {
            "participant": self.participant, "model": self.model, "loglik": self.loglik,
            "n_params": self.n_params, "n_trials": self.n_trials, "aic": self.aic, "bic": self.bic,
            "converged": self.converged, "message": self.message, "n_starts": self.n_starts,
            "starts_at_best": self.starts_at_best, "log_posterior": self.log_posterior,
            "fast_path": self.fast_path, "starts_near_best": self.starts_near_best,
            "at_bound": ";".join(self.at_bound), "fit_ok": self.fit_ok, "fit_issues": "; ".join(self.fit_issues),
            "polished": self.polished, "interval_method": self.interval_method,
        }
        out.update({f"param_{k}": v for k, v in self.params.items()})
        for prefix, values in (("se", self.se), ("lower", self.lower), ("upper", self.upper)):
            out.update({f"{prefix}_{k}": v for k, v in values.items()})
        return out


def free_box(s: ParamSpec) -> tuple[float, float]:
    """Bounds the optimiser keeps on a parameter's unbounded coordinate: +-FREE_LIMIT for a
    logit or log transform, else the natural bounds with an infinite side at +-UNBOUNDED_LIMIT."""
    if s.transform in ("logit", "log"):
        return -FREE_LIMIT, FREE_LIMIT
    lo = s.lower if math.isfinite(s.lower) else -UNBOUNDED_LIMIT
    hi = s.upper if math.isfinite(s.upper) else UNBOUNDED_LIMIT
    return lo, hi


def draw_start(s: ParamSpec, rng: np.random.Generator) -> float:
    """A random starting value (natural units) for one parameter.

    Two-sided bounds: uniform over the middle 90% of the range in the transformed coordinate
    (logit-uniform in [-2.2, 2.2]); lower bound only: lower + default * exp(N(0, 1));
    unbounded: default + N(0, 1). Common practice, no source. (The fitter itself draws over the
    plausible ranges of :mod:`.starts`.)
    """
    if s.transform == "logit":
        return s.from_free(rng.uniform(-2.2, 2.2))
    if s.transform == "log":
        scale = max(s.default - s.lower, 1e-3)
        return s.lower + scale * math.exp(rng.normal())
    lo, hi = free_box(s)
    return float(np.clip(s.default + rng.normal(), lo, hi))


def _optimiser_message(raw: object) -> str:
    """The optimiser's stop message, never empty: L-BFGS-B sometimes says only 'ABNORMAL: '."""
    text = str(raw if raw is not None else "").strip()
    if not text:
        return "stopped with no message from the optimiser"
    if text.rstrip(": ").upper() == "ABNORMAL":
        return "ABNORMAL: the line search found no better point (the optimiser gave no detail)"
    return text


def _feasible_only(loglik: Callable[[np.ndarray], float]) -> Callable[[np.ndarray], float]:
    """``loglik`` with -inf where the model refuses the parameter values (ConfigError), for the
    search only: a point outside the model's feasible set (the random model's p_hotkey +
    p_learn > 1) is a point the optimum cannot be at. The reported ln L uses ``loglik`` itself, so
    a fit that ends at a refused point still raises the model's error."""

    def guarded(theta: np.ndarray) -> float:
        try:
            return float(loglik(theta))
        except ConfigError:
            return -math.inf

    return guarded


def _bound_values(s: ParamSpec, box: tuple[float, float]) -> list[float]:
    """Natural values at the ends of the optimiser's box that are real bounds of the parameter:
    both ends for a logit transform, the lower one for a log transform, the finite natural
    bounds of an untransformed parameter (none for an unbounded one)."""
    if s.transform == "logit":
        return [s.from_free(box[0]), s.from_free(box[1])]
    if s.transform == "log":
        return [s.from_free(box[0])]
    return [b for b in (s.lower, s.upper) if math.isfinite(b)]


def _cheap_to_bound(loglik: Callable[[np.ndarray], float], theta: np.ndarray, index: int, s: ParamSpec,
                    box: tuple[float, float], ll: float) -> bool:
    """Whether putting parameter ``index`` on one of its bounds (the others held at ``theta``)
    costs less than :data:`NEAR_BEST_NATS` of ln L: the data do not tell the estimate from the
    bound, whatever its coordinate. (On always-menu data the choice kernel's beta_ck ended at
    49.99 and 24.9 of its 0..50 range with a flat likelihood towards 50; the coordinate test
    alone did not flag either.)"""
    for value in _bound_values(s, box):
        moved = theta.copy()
        moved[index] = value
        v = float(loglik(moved))
        if np.isfinite(v) and ll - v < NEAR_BEST_NATS:
            return True
    return False


def _at_bound(s: ParamSpec, x: float, box: tuple[float, float]) -> bool:
    """Whether the transformed coordinate ``x`` sits at the end of its box (cheap; used by the
    optimiser's restart decision)."""
    if s.transform in ("logit", "log"):
        return abs(x) >= AT_BOUND_FREE or (s.transform == "log" and x <= -AT_BOUND_FREE)
    width = box[1] - box[0]
    return min(x - box[0], box[1] - x) <= 1e-6 * width


def fit_participant(
    spec: ModelSpec,
    trials: pd.DataFrame,
    context: AgentContext,
    n_starts: int = 10,
    seed: int | np.random.SeedSequence = 0,
    priors: Mapping[str, Any] | None = None,
    participant: str = "",
    start_ranges: Mapping[str, tuple[float, float]] | None = None,
    warm_starts: Sequence[Mapping[str, float]] = (),
    intervals: str = "wald",
) -> FitResult:
    """Fit ``spec`` to one participant's trials (``participant_trials`` frame) by ML or MAP.

    Start 1 is the parameters' defaults, the other ``n_starts - 1`` are drawn over the plausible
    ranges (``start_ranges`` overrides them per parameter, natural units); ``warm_starts`` are
    extra starts (free parameter -> natural value). With ``priors`` (name -> frozen scipy
    distribution) the MAP estimate is returned; ln L, AIC and BIC are then evaluated at the MAP
    point and the standard errors come from the posterior's curvature. ``intervals``: 'wald'
    (from the standard errors), 'profile' (profile likelihood) or 'none' (no standard errors).
    """
    if n_starts < 1:
        raise ConfigError(f"n_starts must be >= 1, got {n_starts}")
    if intervals not in INTERVAL_METHODS:
        raise ConfigError(f"intervals must be one of {list(INTERVAL_METHODS)}, got {intervals!r}")
    f, fast = loglik_function(spec, trials, context)
    guarded = _feasible_only(f)
    specs = spec.build(context).param_specs()
    free = [n for n in specs if n not in spec.fixed]
    check_ranges(specs, start_ranges, f"model {spec.label!r}")
    priors = dict(priors or {})
    unknown = set(priors) - set(free)
    if unknown:
        raise ConfigError(f"model {spec.label!r}: prior for unknown or fixed parameter(s) {sorted(unknown)}")
    base = np.array([spec.fixed.get(n, specs[n].default) for n in specs], dtype=float)
    where = [list(specs).index(n) for n in free]
    n_trials = len(trials)

    def natural(x: np.ndarray) -> np.ndarray:
        theta = base.copy()
        for j, (n, v) in enumerate(zip(free, x, strict=True)):
            theta[where[j]] = specs[n].from_free(float(v))
        return theta

    def log_prior(theta: np.ndarray) -> float:
        return float(sum(priors[n].logpdf(theta[where[free.index(n)]]) for n in priors))

    def neg_total(x: np.ndarray) -> float:
        theta = natural(x)
        value = guarded(theta) + (log_prior(theta) if priors else 0.0)
        return -value if np.isfinite(value) else 1e12 * max(n_trials, 1)

    def objective(x: np.ndarray) -> float:
        return neg_total(x) / max(n_trials, 1)

    if not free:
        ll = float(f(base))
        return FitResult(participant, spec.label, dict(zip(specs, base.tolist(), strict=True)), ll, 0, n_trials,
                         True, "no free parameters", 0, 0, ll + log_prior(base) if priors else None, fast,
                         interval_method=intervals)
    rng = np.random.default_rng(seed)
    boxes = [free_box(specs[n]) for n in free]

    def to_x(values: Mapping[str, float] | Sequence[float]) -> np.ndarray:
        seq = [values[n] for n in free] if isinstance(values, Mapping) else list(values)
        return np.array([np.clip(specs[n].to_free(float(v)), *box) for n, v, box in zip(free, seq, boxes, strict=True)])

    def draw() -> np.ndarray:
        return to_x([draw_in_range(specs[n], rng, start_ranges) for n in free])

    def local(x0: np.ndarray) -> optimize.OptimizeResult:
        return optimize.minimize(objective, x0, method="L-BFGS-B", bounds=boxes,
                                 options={"maxiter": 2000, "gtol": 1e-8})

    def doubtful(r: optimize.OptimizeResult) -> bool:
        return (not r.success) or any(_at_bound(specs[n], float(v), box) for n, v, box in zip(free, r.x, boxes,
                                                                                            strict=True))

    starts = [to_x([specs[n].default for n in free])] + [draw() for _ in range(n_starts - 1)]
    starts += [to_x(w) for w in warm_starts]
    polished = confirmed = False
    with single_threaded_blas():
        results = [local(x0) for x0 in starts]
        best = min(results, key=lambda r: r.fun)
        if doubtful(best):  # restart from fresh draws, then polish without derivatives
            results += [local(draw()) for _ in range(n_starts)]
            best = min(results, key=lambda r: r.fun)
        n_runs = len(results)  # starts and restarts (the polish below starts from the best)
        if doubtful(best):
            simplex = optimize.minimize(objective, best.x, method="Nelder-Mead", bounds=boxes,
                                        options={"maxfev": 400 * len(free), "xatol": 1e-7, "fatol": 1e-12})
            again = local(simplex.x)
            polished = True
            before = best.fun
            if again.fun <= min(best.fun, simplex.fun) + 1e-12:  # the gradient run confirms the polished point
                best = again
            elif simplex.fun < best.fun - 1e-12:
                best = simplex
            # a point the derivative-free search cannot improve on is a confirmed optimum, whatever
            # the line search said (L-BFGS-B often ends 'ABNORMAL' on a parameter at its bound)
            confirmed = (before - best.fun) * max(n_trials, 1) < 1e-6
            results += [simplex, again]
        totals = np.array([r.fun for r in results]) * max(n_trials, 1)
        best_total = float(best.fun) * max(n_trials, 1)
        theta = natural(best.x)
        ll = float(f(theta))
        at_bound = tuple(n for j, (n, v, box) in enumerate(zip(free, best.x, boxes, strict=True))
                         if _at_bound(specs[n], float(v), box)
                         or _cheap_to_bound(guarded, theta, where[j], specs[n], box, ll))
        issues = []
        if at_bound:
            issues.append(f"at a bound: {', '.join(at_bound)}")
        message = _optimiser_message(best.message)
        converged = bool(getattr(best, "success", True))
        if not converged and confirmed:
            converged, message = True, f"{message}; accepted: the derivative-free polish could not improve it"
        elif not converged and _stationary(neg_total, best.x, free, at_bound):
            converged, message = True, (f"{message}; accepted: |d ln L/dx| <= {STATIONARY_GRADIENT} off the "
                                        "bounds")
        if not converged:
            issues.append(f"optimiser did not converge ({message})")
        near = int(np.sum(totals[:n_runs] <= best_total + NEAR_BEST_NATS))
        if n_runs >= 3 and near <= 1:
            issues.append(f"only {near} of {n_runs} starts (with restarts) within {NEAR_BEST_NATS} nats of the best")
        se, lower, upper = _uncertainty(neg_total, best.x, free, specs, boxes, at_bound, intervals, issues,
                                        max(n_trials, 1))
    return FitResult(
        participant=participant, model=spec.label, params=dict(zip(specs, theta.tolist(), strict=True)),
        loglik=ll, n_params=len(free), n_trials=n_trials, converged=converged,
        message=message, n_starts=n_runs,
        starts_at_best=int(np.sum(totals[:n_runs] <= best_total + 1e-3)),
        log_posterior=(ll + log_prior(theta)) if priors else None, fast_path=fast,
        starts_near_best=near, at_bound=at_bound, fit_ok=not issues, fit_issues=tuple(issues),
        se=se, lower=lower, upper=upper, interval_method=intervals, polished=polished,
    )


#: Largest |d ln L / d x| (nats per unit of a transformed coordinate) at an accepted optimum whose
#: line search ended abnormally (an assumption of this project).
STATIONARY_GRADIENT = 1e-3


def _stationary(neg_total, x: np.ndarray, free: list[str], at_bound: tuple[str, ...], h: float = 1e-5) -> bool:
    """Whether the gradient of -ln L vanishes in every coordinate not at a bound (central differences)."""
    for j, n in enumerate(free):
        if n in at_bound:
            continue
        e = np.zeros(len(x))
        e[j] = h
        if abs(neg_total(x + e) - neg_total(x - e)) / (2 * h) > STATIONARY_GRADIENT:
            return False
    return True


def _uncertainty(neg_total, x: np.ndarray, free: list[str], specs: Mapping[str, ParamSpec],
                 boxes: list[tuple[float, float]], at_bound: tuple[str, ...], intervals: str,
                 issues: list[str], n_trials: int = 1) -> tuple[dict[str, float], dict[str, float], dict[str, float]]:
    """Standard errors (delta method from the transformed coordinates) and intervals of the free
    parameters; a failure is added to ``issues``."""
    if intervals == "none":
        return {}, {}, {}
    interior = [j for j, n in enumerate(free) if n not in at_bound]
    sd, problem = transformed_sd(neg_total, x, interior)
    if problem:
        issues.append(f"no standard errors: {problem}")
    se, lower, upper = {}, {}, {}
    for j, n in enumerate(free):
        s = specs[n]
        h = 1e-6
        slope = abs(s.from_free(float(x[j]) + h) - s.from_free(float(x[j]) - h)) / (2 * h)
        se[n] = float(slope * sd[j]) if np.isfinite(sd[j]) else float("nan")
        if intervals == "profile":  # at a bound: one-sided, the bound to where the profile drops 1.92
            lo_x, hi_x = profile_interval(neg_total, np.asarray(x, float), j, boxes, float(sd[j]), n_trials)
        elif np.isfinite(sd[j]):
            lo_x, hi_x = float(x[j]) - Z95 * sd[j], float(x[j]) + Z95 * sd[j]
        else:
            lower[n] = upper[n] = float("nan")
            continue
        lower[n], upper[n] = interval_ends(s, lo_x, hi_x, boxes[j])
    return se, lower, upper


def interval_ends(s: ParamSpec, lo_x: float, hi_x: float, box: tuple[float, float]) -> tuple[float, float]:
    """Natural (lower, upper) of the transformed interval [lo_x, hi_x]; an end at or past the end of the
    optimiser's box is reported as the parameter's own bound (``s.lower``/``s.upper``: 0 rather than
    logit -30's 9.4e-14, infinite for an unbounded side), since the data set no limit before it."""
    reach = 1e-9 * (box[1] - box[0])
    lo = s.lower if lo_x <= box[0] + reach else s.from_free(max(lo_x, box[0]))
    hi = s.upper if hi_x >= box[1] - reach else s.from_free(min(hi_x, box[1]))
    return float(min(lo, hi)), float(max(lo, hi))
