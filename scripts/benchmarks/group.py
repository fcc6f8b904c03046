"""Benchmark of group-level inference (figures are wall times and ratios measured in this run).

1. Random-effects model selection (variational BMS, exceedance and protected exceedance) on
   10,000 participants x 5 models of synthetic log evidence: wall time (target < 1 s), against one
   softmax pass over the same matrix (the core of one variational iteration) as the reference.
   Exceedance probabilities by the bounded log-space integral, checked against 10^6 Dirichlet draws.

``quick`` uses 1,000 participants and fewer repeats.
"""

from __future__ import annotations

import os

import numpy as np
from scipy.special import softmax

from benchmarks.timing import Out, median_seconds
from shortcut_gym.lab.compare import exceedance_monte_carlo, random_effects_bms


def _load() -> str:
    return ", ".join(f"{v:.2f}" for v in os.getloadavg())


def model_selection(quick: bool, out: Out) -> None:
    """Part 1: BMS wall time on a large group."""
    n, k = (1_000 if quick else 10_000), 5
    rng = np.random.default_rng(0)
    lme = rng.normal(scale=3.0, size=(n, k))
    lme[:, 0] += 0.02  # a slight lead: counts stay close, the hard case for the integral
    repeats = 3 if quick else 7
    reference = median_seconds(lambda: softmax(lme, axis=1), 20, warm_up=True)
    wall = median_seconds(lambda: random_effects_bms(lme), repeats, warm_up=True)
    res = random_effects_bms(lme)
    mc, se = exceedance_monte_carlo(res.alpha, 10**6, np.random.default_rng(1))
    out(f"== random-effects BMS, {n} participants x {k} models")
    out(f"softmax pass (reference)   {reference * 1e3:10.3f} ms")
    out(f"BMS + exceedance           {wall * 1e3:10.3f} ms   ratio {wall / reference:8.1f}x   "
        f"(target < 1 s: {'met' if wall < 1.0 else 'missed'}); {res.iterations} iterations")
    out("exceedance (integral)      " + " ".join(f"{v:.4f}" for v in res.exceedance))
    out("exceedance (10^6 draws)    " + " ".join(f"{v:.4f}" for v in mc)
        + f"   max |difference| {np.max(np.abs(res.exceedance - mc)):.5f} (largest se {se.max():.5f})")
    out("protected exceedance       " + " ".join(f"{v:.4f}" for v in res.protected_exceedance)
        + f"   BOR {res.bor:.3g}")


def run(quick: bool = False, out: Out = print) -> None:
    """Print every part."""
    out(f"load average (1, 5, 15 min) at start: {_load()} on {os.cpu_count()} cores")
    model_selection(quick, out)
    out(f"load average (1, 5, 15 min) at end: {_load()}")
