"""Benchmark of the lab's fitting (figures are ratios/wall times measured in this run).

1. One log-likelihood evaluation of a composed learner (the 8-parameter mechanism list of
   :data:`PLANNER`) over 1,000 trials: the compiled likelihood versus (a) the same kernel code run as plain Python
   (numba's ``py_func`` of every rule) and (b) the lab's generic replay loop through
   ``action_probabilities`` + ``observe``. Medians of repeated timings. Also the planned-choice
   model's likelihood per call against the compiled delta rule (target within 5x), and its one-off
   set-up (the plan and the log's action values).
2. Fitting 3 models (static_softmax, a 4-parameter choice-kernel learner and the 8-parameter
   composed planner: the models this figure was first measured on, 10.6 s) x 50 participants x
   1,000 trials x 10 starts with 2 worker processes: wall time (target < 120 s).

3. The rationality analysis (lab/rationality: duration fit, own-world plan, choice scoring,
   planned_choice and rescorla_wagner fits, the headline's planner simulations) on 50
   participants x 400 trials with trial-time noise (CV 0.2) on 2 processes: wall time (target <
   180 s) with the default number of simulated planner users per participant and with 16 (the
   former default, the reference), and the headline's simulations alone.

``quick`` uses 400 trials per participant, 4 participants, 2 starts and fewer repeats (and 3
participants x 160 trials for part 3).
"""

from __future__ import annotations

import os
import time

import numpy as np

from benchmarks.former_fit import former_fit_log
from benchmarks.timing import Out, load_average, median_seconds
from shortcut_gym.agents.base import AgentContext
from shortcut_gym.agents.learning import TrialArrays, rules
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import participant_trials, validate_log
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_log, loglik_function, replay_probabilities

#: The composed learners the figures were first measured with (then named rescorla_wagner and
#: choice_kernel, before those names became the published 2-parameter models).
PLANNER = ModelSpec("composed_learner", "planner", {"mechanisms": [
    "value", "memory_aware", "planning", "incidental", "forgetting", "perseveration", "lapse"]})
HABIT = ModelSpec("composed_learner", "habit", {"mechanisms": ["choice_kernel", "perseveration", "lapse"]})


def run(quick: bool = False, out: Out = print, participants: int | None = None, starts: int | None = None,
        jobs: int = 2, rationality_participants: int | None = None) -> None:
    """Print both parts; ``participants`` and ``starts`` default to 50 and 10 (4 and 2 when ``quick``)."""
    participants = participants if participants is not None else (4 if quick else 50)
    starts = starts if starts is not None else (2 if quick else 10)
    for name, value in (("participants", participants), ("starts", starts), ("jobs", jobs)):
        if value < 1:
            raise ValueError(f"{name} must be >= 1, got {value}")
    out(f"load average (1, 5, 15 min) at start: {load_average()} on {os.cpu_count()} cores")
    sessions = 10 if quick else 25  # of 40 trials: 1,000 trials per person (400 quick)
    world = make_world(schedule={"sessions": sessions, "trials_per_session": 40})
    rng = np.random.default_rng(0)
    rw = PLANNER
    log = validate_log(simulate_log(world, rw, participants, rng, prefix="B"), world.commands)
    trials = participant_trials(log, "B-0")
    ctx = AgentContext(world.commands.n_commands, len(trials), world.commands.names, tuple(world.observation_names()))
    agent = rw.build(ctx)
    theta = np.array([agent.params[n] for n in agent.param_specs()])

    # 1. likelihood: compiled vs plain Python vs replay loop
    f, fast = loglik_function(rw, trials, ctx)
    if not fast:
        raise RuntimeError("the composed learner has no compiled likelihood (loglik_function gave the replay loop)")
    f(theta)  # compile
    compiled = median_seconds(lambda: f(theta), 50 if quick else 200)
    slow_repeats = 3 if quick else 5
    names = ("belief_now", "decide", "update", "init_state", "log_likelihood_kernel")
    saved = {r: getattr(rules, r) for r in names}
    try:
        for r in names[:-1]:
            setattr(rules, r, saved[r].py_func)
        logged = TrialArrays.from_frame(trials, ctx.n_commands).logged()
        rule_set = agent.rule_set(theta)
        py = saved["log_likelihood_kernel"].py_func
        call = (logged, len(trials), ctx.n_commands, rule_set)
        plain_value = py(*call)
        plain = median_seconds(lambda: py(*call), slow_repeats)
    finally:
        for r, v in saved.items():
            setattr(rules, r, v)
    codes = trials["action"].map({"menu": 0, "hotkey": 1, "learn": 2}).to_numpy()

    def replay() -> float:
        p = replay_probabilities(rw.build(ctx), trials, ctx)
        return float(np.log(p[np.arange(len(codes)), codes]).sum())

    replay_value = replay()
    replay_t = median_seconds(replay, slow_repeats)
    out(f"== one log-likelihood evaluation, composed planner ({len(theta)} parameters), {len(trials)} trials")
    out(f"compiled (numba)           {compiled * 1e6:10.1f} us   ln L = {f(theta):.6f}")
    out(f"plain Python (same code)   {plain * 1e6:10.1f} us   ln L = {plain_value:.6f}   "
        f"ratio {plain / compiled:8.1f}x")
    out(f"replay loop (protocol)     {replay_t * 1e6:10.1f} us   ln L = {replay_value:.6f}   "
        f"ratio {replay_t / compiled:8.1f}x")
    out("target: compiled at least 50x the plain loop")

    # 1b. the planned-choice likelihood (plan and logged action values once, then a compiled loop)
    planned = ModelSpec("planned_choice", options={"world": world})
    t = time.perf_counter()
    g, _ = loglik_function(planned, trials, ctx)
    setup = time.perf_counter() - t
    beta = np.array([2.0])
    g(beta)
    per_call = median_seconds(lambda: g(beta), 50 if quick else 200)
    out(f"planned_choice per call    {per_call * 1e6:10.1f} us   ln L = {g(beta):.6f}   "
        f"ratio to compiled delta rule {per_call / compiled:6.2f}x (target within 5x)")
    out(f"planned_choice set-up      {setup:10.2f} s    (the plan and the log's action values, once per world "
        f"and log)")

    # 2. the 3-model fit on worker processes: the former fitter, then the current one without and
    # with standard errors (the same log, models, starts and processes)
    specs = [ModelSpec("static_softmax"), HABIT, rw]
    context = context_for(log, world.commands.names, world)
    t = time.perf_counter()
    former = np.array(former_fit_log(log, specs, context, starts, 0, jobs))
    former_wall = time.perf_counter() - t
    t = time.perf_counter()
    fit_log(log, specs, context, n_starts=starts, seed=0, n_jobs=jobs, intervals="none")
    bare_wall = time.perf_counter() - t
    t = time.perf_counter()
    fits = fit_log(log, specs, context, n_starts=starts, seed=0, n_jobs=jobs, progress=not quick)
    wall = time.perf_counter() - t
    out(f"\n== fit {len(specs)} models x {participants} participants x {len(trials)} trials x "
        f"{starts} starts on {jobs} processes (first measured: 10.6 s with the former fitter)")
    out(f"former fitter (summed objective, no checks)        {former_wall:7.1f} s")
    out(f"current, diagnostics, restarts, no standard errors {bare_wall:7.1f} s   "
        f"x{bare_wall / former_wall:.2f} of former")
    out(f"current, diagnostics and standard errors (default) {wall:7.1f} s   x{wall / former_wall:.2f} of former; "
        f"standard errors add {wall - bare_wall:.1f} s (target: all under 120 s)")
    out(f"{wall / len(fits):.2f} s per participant x model; fits ok {int(fits['fit_ok'].sum())}/{len(fits)}, "
        f"polished {int(fits['polished'].sum())}")
    gain = fits["loglik"].to_numpy() - former
    out(f"ln L current - former per fit: min {gain.min():.3f}, median {np.median(gain):.3f}, max {gain.max():.2f}; "
        f"fits where the former fitter was more than 0.5 nats worse: {int((gain > 0.5).sum())}/{len(gain)}")
    out(fits.groupby("model")[["loglik", "bic"]].sum().to_string(float_format=lambda v: f"{v:.1f}"))
    rationality(quick, out, rationality_participants, jobs)
    out(f"load average (1, 5, 15 min) at end: {load_average()}")


def rationality(quick: bool, out: Out, participants: int | None, jobs: int) -> None:
    """Part 3: wall time of the whole rationality analysis, at the default number of simulated
    planner users for the headline and at the former 16 (the reference, same run), and of the
    headline's simulations alone."""
    from shortcut_gym.lab.rationality import DEFAULT_SIMS, PlannerOptions, rationality_analysis, simulated_time_lost

    n = participants if participants is not None else (3 if quick else 50)
    world = make_world(schedule={"sessions": 4 if quick else 10, "trials_per_session": 40},
                       costs={"noise": {"cv": 0.2}})
    log = validate_log(simulate_log(world, ModelSpec("rescorla_wagner"), n, np.random.default_rng(1), prefix="R"),
                       world.commands)
    out(f"\n== rationality analysis, {n} participants x {world.horizon} trials on {jobs} processes")
    first = log[log["participant"] == log["participant"].iloc[0]]
    rationality_analysis(first, world, [ModelSpec("rescorla_wagner")], n_starts=1, n_jobs=1, n_sims=2)  # compiles
    walls = {}
    for sims in (16, DEFAULT_SIMS):
        t = time.perf_counter()
        result = rationality_analysis(log, world, [ModelSpec("rescorla_wagner")], n_starts=2, n_jobs=jobs,
                                      n_sims=sims)
        walls[sims] = time.perf_counter() - t
        per = result.participants
        out(f"{sims} simulated planner users per participant: wall time {walls[sims]:.1f} s (target < 180 s for "
            f"50 x 400); {walls[sims] / n:.2f} s per participant; mean simulated_time_lost_se "
            f"{per['simulated_time_lost_se'].mean():.2f} s")
    out(f"wall time ratio {DEFAULT_SIMS} / 16 simulations: {walls[DEFAULT_SIMS] / walls[16]:.2f}")
    out(result.group.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    # the headline's simulations alone, in this process, on the base world (plans cached once)
    options = PlannerOptions()
    trials = [participant_trials(log, pid) for pid in log["participant"].unique()]
    simulated_time_lost(trials[0], world, options, 2, 0)  # plan and compile outside the timing
    t = time.perf_counter()
    for tr in trials:
        simulated_time_lost(tr, world, options, DEFAULT_SIMS, 0)
    alone = time.perf_counter() - t
    out(f"headline simulations alone ({DEFAULT_SIMS} users x {world.horizon} trials per participant, one process, "
        f"plan cached): {alone:.2f} s for {n} participants, {alone / walls[DEFAULT_SIMS]:.1%} of the analysis' wall")
