"""The planner's model of one command's memory between its uses.

Gaps between uses (trials ~ geometric(p_c), the trial interval and the between-session gaps,
discretised by :data:`N_GAP_QUANTILES` equal-probability quantiles), the share of its weight a
trace keeps after an age, the total-trace-weight grid, and the two-number (strength, total
weight) ageing of a memory. Memory formulas of :mod:`shortcut_gym.envs.memory`: ACT-R base level
(Anderson & Lebiere 1998), power and exponential forgetting (Wixted & Ebbesen 1991).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World

N_GAP_QUANTILES = 8
QUANTILE_MIDPOINTS = (np.arange(N_GAP_QUANTILES) + 0.5) / N_GAP_QUANTILES
SUPPORTED_KINDS = ("actr", "actr_exact", "exponential", "power")


#: Why the planner refuses a memory kind outside :data:`SUPPORTED_KINDS`: the one wording every
#: refusal uses (agents, library calls, subcommands), after naming who refuses and the kind.
PLANNER_MEMORY_REASON = (
    "the planner collapses a command's memory into two numbers (strength and total trace weight, every trace "
    "decaying at one rate), and spacing-sensitive decay gives each trace its own rate; use the actr, actr_exact, "
    "exponential or power memory kinds")


class PlannerMemoryError(ConfigError):
    """A world whose memory kind the planner cannot plan for (the message names who needed the plan)."""


def planner_memory_refusal(world: World, who: str) -> str | None:
    """The refusal of ``who`` (an agent, a library call or a subcommand that needs the planner) for
    ``world``, or None when the planner models the world's memory kind."""
    kind = world.memory.kind
    if kind in SUPPORTED_KINDS:
        return None
    return f"{who}: memory kind {kind!r} is refused: {PLANNER_MEMORY_REASON}"


def check_memory_kind(world: World, who: str = "the planner") -> None:
    """Refuse a memory kind the planner does not model (spacing-sensitive decay) with
    :class:`PlannerMemoryError` naming ``who`` needed the plan."""
    refusal = planner_memory_refusal(world, who)
    if refusal is not None:
        raise PlannerMemoryError(refusal)


def gap_distribution(world: World, command: int) -> tuple[np.ndarray, np.ndarray]:
    """Memory-clock gaps (s) between uses of ``command`` and their probabilities: a gap of k
    trials crosses k / trials_per_session session boundaries, the fractional part as a probability."""
    p = float(world.commands.probability[command])
    sch = world.schedule
    gaps_h = sch.gap_h if isinstance(sch.gap_h, list) else [sch.gap_h]
    session_gap_s = float(np.mean(gaps_h)) * 3600.0 * world.memory.gap_time_scale if sch.sessions > 1 else 0.0
    q = QUANTILE_MIDPOINTS
    trials = np.maximum(1.0, np.ceil(np.log1p(-q) / math.log1p(-p))) if p < 1 else np.ones(N_GAP_QUANTILES)
    crossings = trials / sch.trials_per_session
    lo = np.floor(crossings)
    frac = crossings - lo
    gaps = np.concatenate([trials * sch.trial_interval_s + lo * session_gap_s,
                           trials * sch.trial_interval_s + (lo + 1) * session_gap_s])
    probs = np.concatenate([(1 - frac), frac]) / N_GAP_QUANTILES
    keep = probs > 0
    return gaps[keep], probs[keep]


def weight_grid(world: World, n_weight_bins: int) -> np.ndarray:
    """Total-trace-weight grid: geometric from the smallest trace weight to the largest weight
    times the most frequent command's expected uses; one point for exponential memory (no need)."""
    w = world.memory.weights
    label = float(world.aids.key_labels.trace_weight) if world.aids.key_labels.on else 0.0
    pos = [x for x in (w.learn, w.hotkey_success, w.hotkey_failure, w.menu, w.menu + label) if x > 0]
    if world.memory.kind == "exponential" or not pos or n_weight_bins == 1:
        return np.ones(1)
    lo = min(pos)
    hi = max(pos) * max(2.0, float(world.commands.probability.max()) * world.horizon)
    return np.geomspace(lo, max(hi, 2 * lo), n_weight_bins)


def fresh_share(m: Any, age: np.ndarray) -> np.ndarray:
    """Share of its weight a trace keeps ``age`` s after it was laid: e^{-lambda age} (exponential),
    (1 + age/u)^-b (power) or age^-d (ACT-R); ``m`` is the world's memory settings."""
    if m.kind == "exponential":
        return np.exp(-m.exponential_rate_per_s * age)
    if m.kind == "power":
        return (1.0 + age / m.power_time_unit_s) ** (-m.decay)
    return age ** (-m.decay)


def aged_strength(world: World, strength: np.ndarray, weight: np.ndarray, new: float,
                  gaps: np.ndarray) -> np.ndarray:
    """Strength at the next use, (states, gaps): the old traces as one lump of total weight W at the
    effective age a that gives the current strength (S = W a^-d, or W (1 + a/u)^-b), aged by the
    gap, plus the new trace of weight ``new`` laid now; exponential decay is exact."""
    m = world.memory
    S = strength[:, None]
    g = gaps[None, :]
    if m.kind == "exponential":
        return (S + new) * fresh_share(m, g)
    W = weight[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        if m.kind in ("actr", "actr_exact"):
            age = np.where(S > 0, (W / np.where(S > 0, S, 1.0)) ** (1.0 / m.decay), 0.0)
            old = np.where(S > 0, W * (age + g) ** (-m.decay), 0.0)
            return old + new * fresh_share(m, g)
        if m.kind == "power":
            u, b = m.power_time_unit_s, m.decay
            ratio = np.clip(np.where(S > 0, S / np.where(W > 0, W, 1.0), 1.0), 1e-300, 1.0)
            age = u * (ratio ** (-1.0 / b) - 1.0)
            old = np.where(S > 0, W * (1 + (age + g) / u) ** (-b), 0.0)
            return old + new * fresh_share(m, g)
    check_memory_kind(world)
    raise AssertionError("unreachable")
