"""Share of fits at ln L(truth) - 0.5 or better, per generating model: the former optimiser and the current one.

Synthetic participants from each published learning model and two composed learners, true
parameters drawn over the documented plausible ranges (``ParamSpec.plausible``; they include
noisy participants). Each participant is fitted twice on the same log:

* before: the former fitter (``benchmarks.former_fit``: L-BFGS-B on the summed log-likelihood,
  the defaults and starts drawn by ``draw_start``, no restart, polish or warm start);
* after: ``fit_log`` as it is (mean objective, plausible-range starts, restart and polish,
  diagnostics), also giving the count of fits flagged not ok.

Run: .venv/bin/python scripts/fit_truth_share.py [--participants 20] [--sessions 10] [--starts 10]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from benchmarks.former_fit import former_fit

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.recovery import simulate_known
from shortcut_gym.lab.data.logs import participant_trials, validate_log
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_log, loglik_function

MODELS = [
    ModelSpec("rescorla_wagner"), ModelSpec("choice_kernel"), ModelSpec("rw_choice_kernel"),
    ModelSpec("composed_learner", "sticky", {"mechanisms": ["value", "perseveration", "lapse"]}),
    ModelSpec("composed_learner", "planner", {"mechanisms": ["value", "memory_aware", "planning", "forgetting",
                                                             "lapse"]}),
]


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--participants", type=int, default=20)
    parser.add_argument("--sessions", type=int, default=10, help="sessions of 40 trials per participant")
    parser.add_argument("--starts", type=int, default=10)
    args = parser.parse_args()
    world = make_world(schedule={"sessions": args.sessions, "trials_per_session": 40, "gap_h": 20.0})
    print(f"{args.participants} participants x {world.horizon} trials per model, {args.starts} starts")
    print(f"{'model':<18}{'before':>8}{'after':>8}{'not ok':>8}{'before s':>10}{'after s':>10}")
    for m, spec in enumerate(MODELS):
        log, truth = simulate_known(world, spec, args.participants, np.random.default_rng(100 + m))
        log = validate_log(log, world.commands)
        context = context_for(log, world.commands.names, world)
        t0 = time.perf_counter()
        fits = fit_log(log, [spec], context, n_starts=args.starts, seed=1).set_index("participant")
        after_s = time.perf_counter() - t0
        before, after, before_s = 0, 0, 0.0
        for i, row in truth.iterrows():
            trials = participant_trials(log, row["participant"])
            f, _ = loglik_function(spec, trials, context)
            at_truth = f(np.array([row[n] for n in spec.free_parameters()]))
            t0 = time.perf_counter()
            old = former_fit(spec, trials, context, args.starts, np.random.SeedSequence([1, i, 0]))
            before_s += time.perf_counter() - t0
            before += old >= at_truth - 0.5
            after += fits.loc[row["participant"], "loglik"] >= at_truth - 0.5
        n = len(truth)
        print(f"{spec.label:<18}{before / n:>8.2f}{after / n:>8.2f}{int((~fits['fit_ok']).sum()):>8d}"
              f"{before_s:>10.1f}{after_s:>10.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
