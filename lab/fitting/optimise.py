"""Maximum-likelihood (and MAP) fit of one model to one participant.

The optimiser (scipy.optimize.minimize, L-BFGS-B) works on unbounded coordinates given by each
parameter's transform (logit for two-sided bounds, log for lower bounds); starts are drawn from
a seeded generator.
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
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

#: Half-width of the box L-BFGS-B keeps transformed coordinates in (logit 30 ~ 1e-13 from a bound).
FREE_LIMIT = 30.0
#: Box for unbounded ('none', infinite bounds) parameters, in natural units.
UNBOUNDED_LIMIT = 50.0


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
            "fast_path": self.fast_path,
        }
        out.update({f"param_{k}": v for k, v in self.params.items()})
        return out


def _free_box(s: ParamSpec) -> tuple[float, float]:
    if s.transform in ("logit", "log"):
        return -FREE_LIMIT, FREE_LIMIT
    lo = s.lower if math.isfinite(s.lower) else -UNBOUNDED_LIMIT
    hi = s.upper if math.isfinite(s.upper) else UNBOUNDED_LIMIT
    return lo, hi


def draw_start(s: ParamSpec, rng: np.random.Generator) -> float:
    """A random starting value (natural units) for one parameter.

    Two-sided bounds: uniform over the middle 90% of the range in the transformed coordinate
    (logit-uniform in [-2.2, 2.2]); lower bound only: lower + default * exp(N(0, 1));
    unbounded: default + N(0, 1). Common practice, no source.
    """
    if s.transform == "logit":
        return s.from_free(rng.uniform(-2.2, 2.2))
    if s.transform == "log":
        scale = max(s.default - s.lower, 1e-3)
        return s.lower + scale * math.exp(rng.normal())
    lo, hi = _free_box(s)
    return float(np.clip(s.default + rng.normal(), lo, hi))


def fit_participant(
    spec: ModelSpec,
    trials: pd.DataFrame,
    context: AgentContext,
    n_starts: int = 10,
    seed: int | np.random.SeedSequence = 0,
    priors: Mapping[str, Any] | None = None,
    participant: str = "",
) -> FitResult:
    """Fit ``spec`` to one participant's trials (``participant_trials`` frame) by ML or MAP.

    Start 1 is the parameters' defaults, the others are random (:func:`draw_start`). With
    ``priors`` (name -> frozen scipy distribution) the MAP estimate is returned; ln L, AIC and BIC
    are then evaluated at the MAP point.
    """
    if n_starts < 1:
        raise ConfigError(f"n_starts must be >= 1, got {n_starts}")
    f, fast = loglik_function(spec, trials, context)
    specs = spec.build(context).param_specs()
    free = [n for n in specs if n not in spec.fixed]
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

    def objective(x: np.ndarray) -> float:
        theta = natural(x)
        value = f(theta) + (log_prior(theta) if priors else 0.0)
        return -value if np.isfinite(value) else 1e12

    if not free:
        ll = float(f(base))
        return FitResult(participant, spec.label, dict(zip(specs, base.tolist(), strict=True)), ll, 0, n_trials,
                         True, "no free parameters", 0, 0, ll + log_prior(base) if priors else None, fast)
    rng = np.random.default_rng(seed)
    boxes = [_free_box(specs[n]) for n in free]
    results = []
    with single_threaded_blas():
        for i in range(n_starts):
            start = [specs[n].default if i == 0 else draw_start(specs[n], rng) for n in free]
            x0 = np.array([np.clip(specs[n].to_free(v), *box) for n, v, box in zip(free, start, boxes, strict=True)])
            res = optimize.minimize(objective, x0, method="L-BFGS-B", bounds=boxes)
            results.append(res)
    values = np.array([r.fun for r in results])
    best = results[int(np.argmin(values))]
    theta = natural(best.x)
    ll = float(f(theta))
    return FitResult(
        participant=participant, model=spec.label, params=dict(zip(specs, theta.tolist(), strict=True)),
        loglik=ll, n_params=len(free), n_trials=n_trials, converged=bool(best.success),
        message=str(best.message), n_starts=n_starts,
        starts_at_best=int(np.sum(values <= best.fun + 1e-3)),
        log_posterior=(ll + log_prior(theta)) if priors else None, fast_path=fast,
    )
