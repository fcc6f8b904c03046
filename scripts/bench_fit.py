"""Benchmark of the lab's fitting (figures are ratios/wall times measured in this run).

1. One log-likelihood evaluation of a learning model (rescorla_wagner, every default mechanism)
   over 1,000 trials: the compiled likelihood versus (a) the same kernel code run as plain Python
   (numba's ``py_func`` of every rule) and (b) the lab's generic replay loop through
   ``action_probabilities`` + ``observe``. Medians of repeated timings.
2. Fitting 3 models (static_softmax, choice_kernel, rescorla_wagner) x 50 participants x 1,000
   trials x 10 starts with 2 worker processes: wall time (target < 120 s).

Run: .venv/bin/python scripts/bench_fit.py [--participants 50] [--starts 10] [--jobs 2]
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

from shortcut_gym.agents import learning
from shortcut_gym.agents.base import AgentContext
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_log, loglik_function, replay_probabilities
from shortcut_gym.lab.logs import participant_trials, validate_log
from shortcut_gym.lab.predictive import simulate_log


def median_time(f, repeats: int) -> float:
    """Median seconds of ``repeats`` calls."""
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        f()
        times.append(time.perf_counter() - t)
    return float(np.median(times))


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--participants", type=int, default=50)
    parser.add_argument("--starts", type=int, default=10)
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args()
    print("load average (1, 5, 15 min) at start: " + ", ".join(f"{v:.2f}" for v in os.getloadavg())
          + f" on {os.cpu_count()} cores")
    world = make_world(schedule={"sessions": 25, "trials_per_session": 40})  # 1,000 trials per person
    rng = np.random.default_rng(0)
    rw = ModelSpec("rescorla_wagner")
    log = validate_log(simulate_log(world, rw, args.participants, rng, prefix="B"), world.commands)
    trials = participant_trials(log, "B-0")
    ctx = AgentContext(world.commands.n_commands, len(trials), world.commands.names, tuple(world.observation_names()))
    agent = rw.build(ctx)
    theta = np.array([agent.params[n] for n in agent.param_specs()])

    # 1. likelihood: compiled vs plain Python vs replay loop
    f, fast = loglik_function(rw, trials, ctx)
    assert fast
    f(theta)  # compile
    compiled = median_time(lambda: f(theta), 200)
    rules = ("_belief_now", "_decide", "_update", "_init_state", "log_likelihood_kernel")
    saved = {r: getattr(learning, r) for r in rules}
    try:
        for r in rules[:-1]:
            setattr(learning, r, saved[r].py_func)
        arrays = learning.TrialArrays.from_frame(trials, ctx.n_commands)
        par, flags = agent.full_parameters(theta), agent.flags()
        py = saved["log_likelihood_kernel"].py_func
        call = (arrays.command, arrays.action, arrays.outcome, arrays.duration_s, arrays.dt_s, arrays.trial,
                len(trials), ctx.n_commands, par, flags)
        plain_value = py(*call)
        plain = median_time(lambda: py(*call), 5)
    finally:
        for r, v in saved.items():
            setattr(learning, r, v)
    codes = trials["action"].map({"menu": 0, "hotkey": 1, "learn": 2}).to_numpy()

    def replay() -> float:
        p = replay_probabilities(rw.build(ctx), trials, ctx)
        return float(np.log(p[np.arange(len(codes)), codes]).sum())

    replay_value = replay()
    replay_t = median_time(replay, 5)
    print(f"== one log-likelihood evaluation, rescorla_wagner ({len(theta)} parameters), {len(trials)} trials")
    print(f"compiled (numba)           {compiled * 1e6:10.1f} us   ln L = {f(theta):.6f}")
    print(f"plain Python (same code)   {plain * 1e6:10.1f} us   ln L = {plain_value:.6f}   "
          f"ratio {plain / compiled:8.1f}x")
    print(f"replay loop (protocol)     {replay_t * 1e6:10.1f} us   ln L = {replay_value:.6f}   "
          f"ratio {replay_t / compiled:8.1f}x")
    print("target: compiled at least 50x the plain loop")

    # 2. the 3-model fit on 2 processes
    specs = [ModelSpec("static_softmax"), ModelSpec("choice_kernel"), rw]
    context = context_for(log, world.commands.names)
    t = time.perf_counter()
    fits = fit_log(log, specs, context, n_starts=args.starts, seed=0, n_jobs=args.jobs, progress=True)
    wall = time.perf_counter() - t
    print(f"\n== fit {len(specs)} models x {args.participants} participants x {len(trials)} trials x "
          f"{args.starts} starts on {args.jobs} processes")
    print(f"wall time {wall:.1f} s (target < 120 s); converged {int(fits['converged'].sum())}/{len(fits)}; "
          f"{wall / len(fits):.2f} s per participant x model")
    print(fits.groupby("model")[["loglik", "bic"]].sum().to_string(float_format=lambda v: f"{v:.1f}"))
    print("load average (1, 5, 15 min) at end: " + ", ".join(f"{v:.2f}" for v in os.getloadavg()))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
