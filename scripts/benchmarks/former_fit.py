"""The fitter as it was before the diagnostics, kept for before/after figures (not for use).

L-BFGS-B on the *summed* log-likelihood in the transformed coordinates (box +-30), starts: the
defaults, then ``draw_start`` draws; no restart, polish, warm start, standard errors or checks.
"""

from __future__ import annotations

import multiprocessing
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pandas as pd
from scipy import optimize

from shortcut_gym.lab.data.logs import participant_trials, participants
from shortcut_gym.lab.fitting import FREE_LIMIT, ModelSpec, draw_start, loglik_function
from shortcut_gym.lab.fitting.optimise import single_threaded_blas


def former_fit(spec: ModelSpec, trials: pd.DataFrame, context, n_starts: int, seed) -> float:
    """Best ln L the former fitter reports for one participant."""
    f, _ = loglik_function(spec, trials, context)
    specs = spec.build(context).param_specs()
    free = spec.free_parameters()
    rng = np.random.default_rng(seed)
    box = [(-FREE_LIMIT, FREE_LIMIT)] * len(free)

    def objective(x: np.ndarray) -> float:
        v = f(np.array([specs[n].from_free(float(z)) for n, z in zip(free, x, strict=True)]))
        return -v if np.isfinite(v) else 1e12

    best = np.inf
    with single_threaded_blas():
        for i in range(n_starts):
            start = [specs[n].default if i == 0 else draw_start(specs[n], rng) for n in free]
            x0 = np.clip([specs[n].to_free(v) for n, v in zip(free, start, strict=True)], -FREE_LIMIT, FREE_LIMIT)
            best = min(best, optimize.minimize(objective, x0, method="L-BFGS-B", bounds=box).fun)
    return -float(best)


def _job(args: tuple) -> float:
    return former_fit(*args)


def former_fit_log(log: pd.DataFrame, specs: list[ModelSpec], context, n_starts: int, seed: int,
                   n_jobs: int) -> list[float]:
    """ln L of every participant x model by the former fitter (one job per participant x model)."""
    from shortcut_gym.agents.base import AgentContext

    jobs = []
    for i, pid in enumerate(participants(log)):
        trials = participant_trials(log, pid)
        own = AgentContext(context.n_commands, len(trials), context.command_names)
        jobs += [(spec, trials, own, n_starts, np.random.SeedSequence([seed, i, j])) for j, spec in enumerate(specs)]
    if n_jobs <= 1:
        return [_job(j) for j in jobs]
    with ProcessPoolExecutor(max_workers=n_jobs, mp_context=multiprocessing.get_context("spawn")) as pool:
        return list(pool.map(_job, jobs, chunksize=max(1, len(jobs) // (8 * n_jobs))))
