"""Per-command hotkey memory models: readable reference forms (the simulator kernel mirrors them).

* ACT-R base-level learning: A = ln(sum_j w_j (t - t_j)^-d), d = 0.5 (Anderson & Schooler 1991,
  "Reflections of the environment in memory", Psych. Science 2(6); Anderson & Lebiere 1998,
  *The Atomic Components of Thought*). P(recall) = 1 / (1 + exp(-(A - tau)/s)); latency F e^-A.
  The trace weight w_j generalises the count of presentations (w = 1 is the standard form).
* O(1) hybrid approximation of the base level: Petrov (2006), "Computationally efficient
  approximation of the base-level learning equation in ACT-R", ICCM 2006: the k most recent
  traces exact, the older ones as if spread evenly between the oldest and the k+1-th.
* Spacing-sensitive decay: Pavlik & Anderson (2005), "Practice and forgetting effects on
  vocabulary memory: an activation-based model of the spacing effect", Cognitive Science 29:
  d_j = c e^{m_{j-1}} + a, with m_{j-1} the activation when trace j is laid.
* Exponential and power-law forgetting: Wixted & Ebbesen (1991), "On the form of forgetting",
  Psych. Science 2(6): strength sum_j w_j e^{-lambda age} or sum_j w_j (1 + age/u)^-b, read
  through the same logistic link as ACT-R with A = ln(strength).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Literal

import numpy as np
from numba import njit
from pydantic import Field, model_validator

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.strict import StrictModel

MemoryKind = Literal["actr", "actr_exact", "pavlik_anderson", "exponential", "power"]
#: Integer codes of the memory kinds inside the simulator kernel.
MEMORY_CODES: dict[str, int] = {
    "actr": 0,
    "actr_exact": 1,
    "pavlik_anderson": 2,
    "exponential": 3,
    "power": 4,
}


#: Sane ranges (a project choice, no source): a trace weight above 100 presentations, a
#: threshold outside +-50 (its scale differs by memory kind), a noise s outside 0.01-10 (activation
#: units, like tau), a latency factor above 10 s or a retrieval-failure time F e^-tau above 10
#: minutes is taken for a mistake and refused.
MAX_TRACE_WEIGHT = 100.0
MAX_RETRIEVAL_FAIL_S = 600.0


class TraceWeights(StrictModel):
    """Weight of the trace each event lays (1 = one standard ACT-R presentation).

    Values are assumptions of this project (no source): deliberate learning lays a strong trace,
    a successful hotkey is retrieval practice, a failed attempt followed by the menu shows the
    label as feedback, plain menu use lays an incidental trace only when > 0.
    """

    learn: float = Field(default=2.0, ge=0, le=MAX_TRACE_WEIGHT, description=(
        "weight of the trace a learn trial lays (deliberate rehearsal), "
        "in standard ACT-R presentations (1 = one); 2.0 is an assumption (no source)"))
    hotkey_success: float = Field(default=1.0, ge=0, le=MAX_TRACE_WEIGHT, description=(
        "weight of the trace a recalled hotkey lays (retrieval practice), "
        "in standard ACT-R presentations (1 = one); 1.0 is an assumption (no source)"))
    hotkey_failure: float = Field(default=0.5, ge=0, le=MAX_TRACE_WEIGHT, description=(
        "weight of the trace a failed attempt lays (the label seen in the menu after it), "
        "in standard ACT-R presentations (1 = one); 0.5 is an assumption (no source)"))
    menu: float = Field(default=0.0, ge=0, le=MAX_TRACE_WEIGHT, description=(
        "weight of the trace a plain menu selection lays (incidental; 0 = none), "
        "in standard ACT-R presentations (1 = one); 0.0 is an assumption (no source)"))


class MemorySettings(StrictModel):
    """Memory-model settings. Time is in seconds.

    Defaults: d = 0.5 (Anderson & Lebiere 1998); tau = -3.5, s = 0.4 and F = 0.05 s are
    assumptions of this project, chosen so that a hotkey practised in one session is partly
    forgotten by the next day and a retrieval failure costs F e^-tau = 1.7 s (no source); Pavlik & Anderson (2005)
    c = 0.217, a = 0.177 (from memory: check the paper); gap_time_scale multiplies the time
    between sessions (Pavlik & Anderson's psychological-time factor, 0.025 in their 2005 fit from
    memory; 1.0 = real time).
    """

    kind: MemoryKind = Field(default="actr", description=(
        "memory model: `actr` ACT-R base-level learning (Anderson & Lebiere 1998) in the O(1) hybrid form of "
        "Petrov (2006); `actr_exact` the exact sum over every trace; `pavlik_anderson` spacing-sensitive decay "
        "(Pavlik & Anderson 2005); `exponential` and `power` forgetting (Wixted & Ebbesen 1991)"))
    decay: float = Field(default=0.5, gt=0, lt=1, description=(
        "d (dimensionless): each trace adds w age^-d to the strength (`actr`, `actr_exact`; the exponent b of "
        "`power`); 0.5 is the ACT-R base-level learning default, Anderson & Lebiere (1998)"))
    threshold: float = Field(default=-3.5, ge=-50, le=50, description=(
        "tau (activation units, dimensionless): retrieval threshold of P(recall) = 1 / (1 + exp(-(A - tau) / s)), "
        "Anderson & Lebiere (1998); a failed retrieval takes F e^-tau; -3.5 is an assumption (no source)"))
    noise_s: float = Field(default=0.4, ge=0.01, le=10, json_schema_extra={"unit": ""}, description=(
        "s (activation units, dimensionless; not seconds: the name carries the letter s): activation noise of "
        "P(recall) = 1 / (1 + exp(-(A - tau) / s)), Anderson & Lebiere (1998); 0.4 is an assumption (no source)"))
    latency_factor_s: float = Field(default=0.05, gt=0, le=10, description=(
        "F: a recalled hotkey takes F e^-A to retrieve, a failed one F e^-tau (at most 600 s), Anderson & Lebiere "
        "(1998); 0.05 s is an assumption (no source)"))
    recent_traces: int = Field(default=3, ge=1, le=64, description=(
        "k: traces per command kept exactly by `actr`'s hybrid form, the older ones lumped (Petrov 2006); read by "
        "`actr` only; 3 is a project choice (no source)"))
    spacing_scale: float = Field(default=0.217, ge=0, le=10, description=(
        "c (dimensionless): trace j decays at d_j = c e^(m_j-1) + a, m_j-1 the activation when it is laid "
        "(`pavlik_anderson` only); 0.217, Pavlik & Anderson (2005), from memory"))
    spacing_intercept: float = Field(default=0.177, gt=0, description=(
        "a (dimensionless): the decay of a trace laid with no prior trace, and the floor of d_j (`pavlik_anderson` "
        "only, where it must be < 1); 0.177, Pavlik & Anderson (2005), from memory"))
    exponential_rate_per_s: float = Field(default=2e-5, gt=0, le=1, description=(
        "lambda: strength sum_j w_j e^(-lambda age_j) (`exponential` only; form of Wixted & Ebbesen 1991); "
        "2e-5 per s (half-life 9.6 h) is an assumption (no source)"))
    power_time_unit_s: float = Field(default=1.0, ge=1e-3, le=86_400, description=(
        "u: strength sum_j w_j (1 + age_j / u)^-d (`power` only; form of Wixted & Ebbesen 1991); 1 s is a "
        "project choice (no source)"))
    gap_time_scale: float = Field(default=1.0, ge=1e-6, le=1, description=(
        "factor (dimensionless) on the time between sessions as memory sees it, every kind; 1 = real time; "
        "Pavlik & Anderson's psychological-time factor, 0.025 in their 2005 fit (from memory)"))
    weights: TraceWeights = Field(default=TraceWeights(), description="trace weight laid by each kind of event")

    @model_validator(mode="after")
    def _spacing_decay_below_one(self) -> MemorySettings:
        if self.kind == "pavlik_anderson" and self.spacing_intercept >= 1:
            raise ValueError(f"spacing_intercept must be < 1, got {self.spacing_intercept}")
        fail_s = self.latency_factor_s * math.exp(-self.threshold)
        if fail_s > MAX_RETRIEVAL_FAIL_S:
            raise ValueError(
                f"latency_factor_s={self.latency_factor_s} with threshold={self.threshold} gives a "
                f"retrieval-failure time F e^-tau = {fail_s:.4g} s, above the {MAX_RETRIEVAL_FAIL_S:g} s limit"
            )
        return self


def recall_probability(activation: float, threshold: float, noise_s: float) -> float:
    """ACT-R retrieval probability 1 / (1 + exp(-(A - tau)/s)) (Anderson & Lebiere 1998)."""
    if activation == -math.inf:
        return 0.0
    z = -(activation - threshold) / noise_s
    if z > 700:
        return 0.0
    return 1.0 / (1.0 + math.exp(z))


def retrieval_latency_s(activation: float, latency_factor_s: float) -> float:
    """ACT-R retrieval latency F e^-A (s) (Anderson & Lebiere 1998)."""
    return latency_factor_s * math.exp(-activation)


def _check_ages(now: float, times: Sequence[float]) -> None:
    for t in times:
        if not t < now:
            raise ConfigError(f"trace at {t} s is not before now = {now} s")


def actr_activation(
    now: float, times: Sequence[float], decay: float = 0.5, weights: Sequence[float] | None = None
) -> float:
    """Exact ACT-R base-level activation ln(sum_j w_j (now - t_j)^-d); -inf with no trace."""
    _check_ages(now, times)
    w = [1.0] * len(times) if weights is None else list(weights)
    total = sum(wj * (now - tj) ** (-decay) for tj, wj in zip(times, w) if wj > 0)
    return math.log(total) if total > 0 else -math.inf


def pavlik_anderson_activation(
    now: float,
    times: Sequence[float],
    scale: float = 0.217,
    intercept: float = 0.177,
    weights: Sequence[float] | None = None,
) -> float:
    """Activation with spacing-sensitive decay (Pavlik & Anderson 2005), in seconds.

    Trace j decays at d_j = c e^{m_{j-1}} + a, m_{j-1} the activation just before it was laid
    (m = -inf for the first trace, so d_1 = a).
    """
    _check_ages(now, times)
    w = [1.0] * len(times) if weights is None else list(weights)
    decays: list[float] = []
    for j, tj in enumerate(times):
        prior = sum(w[i] * (tj - times[i]) ** (-decays[i]) for i in range(j) if w[i] > 0)
        m = math.log(prior) if prior > 0 else -math.inf
        decays.append(scale * math.exp(m) + intercept if m > -math.inf else intercept)
    total = sum(w[j] * (now - tj) ** (-decays[j]) for j, tj in enumerate(times) if w[j] > 0)
    return math.log(total) if total > 0 else -math.inf


def exponential_activation(
    now: float, times: Sequence[float], rate_per_s: float, weights: Sequence[float] | None = None
) -> float:
    """ln(sum_j w_j e^{-lambda (now - t_j)}) (exponential forgetting, Wixted & Ebbesen 1991)."""
    _check_ages(now, times)
    w = [1.0] * len(times) if weights is None else list(weights)
    total = sum(wj * math.exp(-rate_per_s * (now - tj)) for tj, wj in zip(times, w) if wj > 0)
    return math.log(total) if total > 0 else -math.inf


def power_activation(
    now: float,
    times: Sequence[float],
    exponent: float,
    time_unit_s: float = 1.0,
    weights: Sequence[float] | None = None,
) -> float:
    """ln(sum_j w_j (1 + age_j/u)^-b) (power-law forgetting, Wixted & Ebbesen 1991)."""
    _check_ages(now, times)
    w = [1.0] * len(times) if weights is None else list(weights)
    total = sum(wj * (1.0 + (now - tj) / time_unit_s) ** (-exponent) for tj, wj in zip(times, w) if wj > 0)
    return math.log(total) if total > 0 else -math.inf


class HybridBaseLevel:
    """O(1)-per-step ACT-R base level (Petrov 2006) for one command, with trace weights.

    The ``recent`` most recent traces are kept exactly; older traces keep only their total weight,
    the time of the oldest and of the newest among them, and contribute
    W (a_o^{1-d} - a_n^{1-d}) / ((1 - d)(a_o - a_n)), the mean of age^-d over [a_n, a_o].
    Since age^-d is decreasing, the old part lies between W a_o^-d and W a_n^-d, which bounds the
    error of A (see :meth:`error_bound`).
    """

    def __init__(self, decay: float = 0.5, recent: int = 3) -> None:
        if not 0 < decay < 1:
            raise ConfigError(f"decay must be in (0, 1), got {decay}")
        if recent < 1:
            raise ConfigError(f"recent must be >= 1, got {recent}")
        self.decay = decay
        self.recent = recent
        self.times: list[float] = []
        self.weights: list[float] = []
        self.old_weight = 0.0
        self.old_first = 0.0
        self.old_last = 0.0

    def add(self, time: float, weight: float = 1.0) -> None:
        """Lay a trace of the given weight at ``time`` (s); weight 0 lays nothing."""
        if weight <= 0:
            return
        if self.times and time < self.times[-1]:
            raise ConfigError(f"traces must be laid in time order, got {time} after {self.times[-1]}")
        self.times.append(time)
        self.weights.append(weight)
        if len(self.times) > self.recent:
            t0, w0 = self.times.pop(0), self.weights.pop(0)
            if self.old_weight == 0.0:
                self.old_first = t0
            self.old_last = t0
            self.old_weight += w0

    def _old_sum(self, now: float) -> float:
        if self.old_weight == 0.0:
            return 0.0
        return _old_lump(now, self.decay, self.old_weight, self.old_first, self.old_last)

    def activation(self, now: float) -> float:
        """Approximate base-level activation at ``now`` (s); -inf with no trace."""
        total = sum(w * (now - t) ** (-self.decay) for t, w in zip(self.times, self.weights))
        total += self._old_sum(now)
        return math.log(total) if total > 0 else -math.inf

    def activations(self, now: np.ndarray) -> np.ndarray:
        """:meth:`activation` at each clock of ``now`` (s, any shape), compiled: the same operations
        in the same order, so equal elementwise (bit for bit where numba and Python share the libm)."""
        now = np.asarray(now, dtype=np.float64)
        flat = _hybrid_activations(np.ascontiguousarray(now).reshape(-1), np.asarray(self.times, dtype=np.float64),
                                   np.asarray(self.weights, dtype=np.float64), self.decay, self.old_weight,
                                   self.old_first, self.old_last)
        return flat.reshape(now.shape)

    def error_bound(self, now: float) -> float:
        """Upper bound on |A_exact - A_hybrid| at ``now``: ln((S_r + W a_n^-d)/(S_r + W a_o^-d))."""
        if self.old_weight == 0.0:
            return 0.0
        d = self.decay
        recent = sum(w * (now - t) ** (-d) for t, w in zip(self.times, self.weights))
        hi = recent + self.old_weight * (now - self.old_last) ** (-d)
        lo = recent + self.old_weight * (now - self.old_first) ** (-d)
        return math.log(hi / lo)


@njit(cache=True)
def _old_lump(now: float, d: float, weight: float, first: float, last: float) -> float:
    """The old traces' contribution W x mean of age^-d over [now - last, now - first]."""
    a_n = now - last
    r = (last - first) / a_n  # (a_o - a_n) / a_n, without cancellation
    if r <= 1e-12:  # mean of age^-d is a_n^-d (1 - d r / 2 + ...); avoids subnormal r
        return weight * a_n ** (-d)
    # a_o^{1-d} - a_n^{1-d} = a_n^{1-d} expm1((1-d) log1p(r)): no catastrophic cancellation
    return weight * a_n ** (-d) * math.expm1((1 - d) * math.log1p(r)) / ((1 - d) * r)


@njit(cache=True)
def _hybrid_activations(now: np.ndarray, times: np.ndarray, weights: np.ndarray, decay: float,
                        old_weight: float, old_first: float, old_last: float) -> np.ndarray:
    """HybridBaseLevel.activation at each clock of ``now`` (1-D), term by term as there."""
    out = np.empty(len(now))
    d = decay
    for i in range(len(now)):
        total = 0.0
        for j in range(len(times)):
            total += weights[j] * (now[i] - times[j]) ** (-d)
        if old_weight != 0.0:
            total += _old_lump(now[i], d, old_weight, old_first, old_last)
        out[i] = math.log(total) if total > 0 else -np.inf
    return out
