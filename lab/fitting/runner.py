"""Fitting many participants x models, on one or several processes."""

from __future__ import annotations

import multiprocessing
from collections.abc import Mapping, Sequence
from concurrent.futures import ProcessPoolExecutor
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.data.logs import participant_trials, participants
from shortcut_gym.lab.fitting.optimise import fit_participant
from shortcut_gym.lab.fitting.specs import ModelSpec


def _job(args: tuple) -> dict[str, Any]:
    spec, trials, context, n_starts, seed, priors, pid = args
    return fit_participant(spec, trials, context, n_starts, seed, priors, pid).row()


def fit_log(
    log: pd.DataFrame,
    specs: Sequence[ModelSpec],
    context: AgentContext,
    n_starts: int = 10,
    seed: int = 0,
    n_jobs: int = 1,
    priors: Mapping[str, Mapping[str, Any]] | None = None,
    progress: bool = False,
) -> pd.DataFrame:
    """Fit every model to every participant of a validated log; one tidy row per participant x model.

    Job (participant i, model j) is seeded with SeedSequence([seed, i, j]), so results do not
    depend on ``n_jobs``. ``priors`` maps a model label to its priors (MAP for that model).
    ``n_jobs`` > 1 uses that many worker processes.
    """
    labels = [s.label for s in specs]
    if len(set(labels)) != len(labels):
        raise ConfigError(f"model labels must be unique, got {labels}")
    priors = priors or {}
    jobs = []
    for i, pid in enumerate(participants(log)):
        trials = participant_trials(log, pid)
        own = AgentContext(context.n_commands, len(trials), context.command_names)
        for j, spec in enumerate(specs):
            jobs.append((spec, trials, own, n_starts, np.random.SeedSequence([seed, i, j]),
                         dict(priors.get(spec.label, {})), pid))
    bar = _progress(len(jobs), "fitting", progress)
    rows = []
    if n_jobs <= 1:
        for job in jobs:
            rows.append(_job(job))
            bar.update(1)
    else:
        with ProcessPoolExecutor(max_workers=n_jobs, mp_context=multiprocessing.get_context("spawn")) as pool:
            for row in pool.map(_job, jobs, chunksize=max(1, len(jobs) // (8 * n_jobs))):
                rows.append(row)
                bar.update(1)
    bar.close()
    return pd.DataFrame(rows)


def _progress(total: int, desc: str, enabled: bool):
    from tqdm.auto import tqdm

    return tqdm(total=total, desc=desc, disable=not enabled, leave=False)


def context_for(log: pd.DataFrame, command_names: Sequence[str]) -> AgentContext:
    """Agent context for fitting a log: its command set and the longest participant history."""
    horizon = int(log.groupby("participant").size().max())
    return AgentContext(len(command_names), horizon, tuple(command_names))


def fitted_agent(spec: ModelSpec, fit_row: Mapping[str, Any], context: AgentContext) -> Agent:
    """The agent of ``spec`` with the fitted parameters of one row of :func:`fit_log`'s table."""
    specs = spec.build(context).param_specs()
    params = {n: float(fit_row[f"param_{n}"]) for n in specs if n not in spec.fixed}
    return spec.build(context, **params)
