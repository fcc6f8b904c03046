"""Operator times of a whole group at once: the duration likelihood under the hierarchical fitter.

Each participant's lognormal duration likelihood (:mod:`.durations`) in unbounded coordinates
x = (ln M, ln K, ln P, ln H, ln encoding, ln F, ln sigma) enters the EM with a Gaussian group
prior of :func:`~shortcut_gym.lab.fitting.laplace_em.em_laplace` (Laplace approximation per
participant). An operator a participant's trials do not identify (no learn trial: no encoding
time) is then drawn to the group mean instead of being held at the base world's value.
Natural-unit posterior SDs by the delta method (d e^x = e^x dx).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from shortcut_gym.envs.world import World
from shortcut_gym.lab.data.logs import participant_trials, participants
from shortcut_gym.lab.fitting.durations import (
    DURATION_PARAMETERS,
    DurationFitError,
    _check_durations,
    base_values,
    implied_world,
    operator_design,
)
from shortcut_gym.lab.fitting.laplace_em import EMResult, FreeLogLik, em_laplace


def duration_loglik_function(trials: pd.DataFrame, world: World, participant: str = "") -> FreeLogLik:
    """f(x) -> lognormal duration ln L of one participant, x = (ln of each operator, ln sigma)."""
    design = operator_design(trials, world)
    _check_durations(design, participant, True)
    log_d = np.log(design.duration_s)
    X, off = design.counts, design.offset_s

    def f(x: np.ndarray) -> float:
        theta = np.exp(x[:-1])
        sigma2 = math.exp(2.0 * x[-1])
        mu = off + X @ theta
        z = log_d - np.log(mu) + 0.5 * sigma2
        return float(np.sum(-log_d - x[-1] - 0.5 * math.log(2 * math.pi) - z * z / (2 * sigma2)))

    return f


def fit_durations_hierarchical(log: pd.DataFrame, world: World, covariance: str = "diagonal",
                               seed: int = 0) -> tuple[EMResult, pd.DataFrame, dict[str, World]]:
    """(EM result, one row per participant of MAP operator times with posterior SDs, the worlds they imply)."""
    pids = participants(log)
    if len(pids) < 2:
        raise DurationFitError(f"the hierarchical duration fit needs >= 2 participants, got {len(pids)}")
    frames = [participant_trials(log, p) for p in pids]
    funcs = [duration_loglik_function(t, world, p) for t, p in zip(frames, pids, strict=True)]
    start = np.r_[np.log(base_values(world)), math.log(0.2)]
    bounds = [(math.log(1e-4), math.log(30.0))] * len(DURATION_PARAMETERS) + [(math.log(1e-4), math.log(5.0))]
    em = em_laplace(funcs, [len(t) for t in frames], start, init_var=1.0, bounds=bounds, covariance=covariance,
                    rng=np.random.default_rng(seed))
    rows, worlds = [], {}
    for pid, post in zip(pids, em.posteriors, strict=True):
        value = np.exp(post.mode)
        sd = value * post.sd
        est = dict(zip(DURATION_PARAMETERS, value[:-1].tolist(), strict=True))
        sds = {f"sd_{n}": float(s) for n, s in zip(DURATION_PARAMETERS, sd, strict=False)}
        row = {"participant": pid, **est, **sds, "sigma": float(value[-1]), "loglik": post.loglik}
        rows.append(row)
        worlds[pid] = implied_world(world, est)
    return em, pd.DataFrame(rows), worlds
