"""Benchmark of group-level inference (figures are wall times and ratios measured in this run).

0. Hierarchical EM (Gaussian group prior, Laplace per participant) of the delta-rule model (the
   learner with only its ``value`` mechanism: alpha, beta) on 100 simulated participants x 500
   trials: wall time (target < 2 min) and EM iterations, against one compiled log-likelihood
   evaluation over 500 trials as the reference; and the per-participant ML fits of the same data,
   with each method's mean squared error to the generating parameters.
1. Random-effects model selection (variational BMS, exceedance and protected exceedance) on
   10,000 participants x 5 models of synthetic log evidence: wall time (target < 1 s), against one
   softmax pass over the same matrix (the core of one variational iteration) as the reference.
   Exceedance probabilities by the bounded log-space integral, checked against 10^6 Dirichlet draws.

``quick`` uses 10 participants x 100 trials for part 0, 1,000 participants for part 1, fewer repeats.
"""

from __future__ import annotations

import os
import time

import numpy as np
from scipy.special import softmax

from benchmarks.timing import Out, load_average, median_seconds
from shortcut_gym.agents.base import AgentContext
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.recovery import simulate_known
from shortcut_gym.lab.compare import exceedance_monte_carlo, random_effects_bms
from shortcut_gym.lab.data.logs import participant_trials, validate_log
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_hierarchical, fit_log, loglik_function


def hierarchical(quick: bool, out: Out) -> None:
    """Part 0: hierarchical EM of the delta-rule model, and per-participant ML on the same log."""
    n, sessions = (10, 2) if quick else (100, 10)
    world = make_world(schedule={"sessions": sessions, "trials_per_session": 50})
    spec = ModelSpec("rescorla_wagner", label="delta_rule", options={"mechanisms": ["value"]})
    t = time.perf_counter()
    log, truth = simulate_known(world, spec, n, np.random.default_rng(0))
    log = validate_log(log, world.commands)
    simulated = time.perf_counter() - t
    context = context_for(log, world.commands.names, world)
    trials = participant_trials(log, truth["participant"].iloc[0])
    f, _ = loglik_function(spec, trials, AgentContext(context.n_commands, len(trials), context.command_names))
    theta = np.array([0.3, 3.0])
    reference = median_seconds(lambda: f(theta), 200, warm_up=True)
    t = time.perf_counter()
    fit = fit_hierarchical(log, spec, context)
    wall = time.perf_counter() - t
    t = time.perf_counter()
    ml = fit_log(log, [spec], context, n_starts=3, seed=0)
    wall_ml = time.perf_counter() - t
    per = truth.merge(fit.participant_table(), on="participant").merge(ml, on="participant", suffixes=("_h", "_ml"))
    out(f"== hierarchical EM, delta rule (alpha, beta), {n} participants x {len(trials)} trials "
        f"(simulated in {simulated:.1f} s)")
    out(f"one log-likelihood (reference) {reference * 1e6:10.1f} us")
    out(f"hierarchical EM            {wall:10.2f} s   ratio {wall / reference:12.0f}x   (target < 120 s: "
        f"{'met' if wall < 120 else 'missed'}); {fit.em.iterations} EM iterations, converged {fit.em.converged}, "
        f"iBIC {fit.ibic:.1f}")
    out(f"per-participant ML (3 starts) {wall_ml:7.2f} s   ratio {wall_ml / reference:12.0f}x")
    for name in ("alpha", "beta"):
        mse_h = float(np.mean((per[f"param_{name}_h"] - per[name]) ** 2))
        mse_ml = float(np.mean((per[f"param_{name}_ml"] - per[name]) ** 2))
        out(f"MSE to the truth, {name:5s}    hierarchical {mse_h:.4f}   per-participant ML {mse_ml:.4f}")
    group = fit.group_table()
    out("group median (95% of participants): " + "; ".join(
        f"{r.parameter} {r.median:.3f} ({r.low_95:.3f}-{r.high_95:.3f})" for r in group.itertuples()))


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
    out(f"load average (1, 5, 15 min) at start: {load_average()} on {os.cpu_count()} cores")
    hierarchical(quick, out)
    model_selection(quick, out)
    out(f"load average (1, 5, 15 min) at end: {load_average()}")
