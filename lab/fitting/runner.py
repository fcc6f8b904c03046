"""Fitting many participants x models, on one or several processes."""

from __future__ import annotations

import dataclasses
import multiprocessing
from collections.abc import Mapping, Sequence
from concurrent.futures import ProcessPoolExecutor
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext
from shortcut_gym.agents.registry import refuse_planner_memory
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.data.logs import participant_trials, participants
from shortcut_gym.lab.fitting.nesting import nested_start, nesting_order
from shortcut_gym.lab.fitting.optimise import fit_participant
from shortcut_gym.lab.fitting.specs import ModelSpec


def _job(args: tuple) -> list[dict[str, Any]]:
    """Every model on one participant; a model nesting an already fitted one starts from that fit
    (with the extra parts switched off), so it never reports a worse ln L than the nested model."""
    specs, trials, context, n_starts, seeds, priors, pid, ranges, intervals, warm = args
    rows: dict[int, dict[str, Any]] = {}
    fitted: list[tuple[ModelSpec, dict[str, float]]] = []
    for j in nesting_order(list(specs)):
        spec = specs[j]
        starts = []
        if warm and not priors.get(spec.label):
            for inner, params in fitted:
                start = nested_start(inner, params, spec)
                if start is not None:
                    starts.append(start)
        res = fit_participant(spec, trials, context, n_starts, seeds[j], priors.get(spec.label), pid,
                              ranges.get(spec.label), starts, intervals)
        fitted.append((spec, res.params))
        rows[j] = res.row()
    return [rows[j] for j in range(len(specs))]


def fit_log(
    log: pd.DataFrame,
    specs: Sequence[ModelSpec],
    context: AgentContext,
    n_starts: int = 10,
    seed: int = 0,
    n_jobs: int = 1,
    priors: Mapping[str, Mapping[str, Any]] | None = None,
    progress: bool = False,
    start_ranges: Mapping[str, Mapping[str, tuple[float, float]]] | None = None,
    intervals: str = "wald",
    warm_start_nested: bool = True,
) -> pd.DataFrame:
    """Fit every model to every participant of a validated log; one tidy row per participant x model.

    Fit (participant i, model j) is seeded with SeedSequence([seed, i, j]), so results do not
    depend on ``n_jobs``. ``priors`` maps a model label to its priors (MAP for that model),
    ``start_ranges`` a label to plausible ranges for the random starts (see
    :func:`~shortcut_gym.lab.fitting.optimise.fit_participant`, also for ``intervals``). With
    ``warm_start_nested`` a model that nests another fitted model (:mod:`.nesting`) also starts
    from that model's fit. ``n_jobs`` > 1 uses that many worker processes (one participant per job).
    """
    labels = [s.label for s in specs]
    if len(set(labels)) != len(labels):
        raise ConfigError(f"model labels must be unique, got {labels}")
    if context.world is not None:
        refuse_planner_memory(context.world, [(s.label, s.name) for s in specs], "fit_log")
    priors = {k: dict(v) for k, v in (priors or {}).items()}
    ranges = {k: dict(v) for k, v in (start_ranges or {}).items()}
    unknown = sorted((set(priors) | set(ranges)) - set(labels))
    if unknown:
        raise ConfigError(f"priors or start ranges for unknown model label(s) {unknown}; models: {labels}")
    jobs = []
    for i, pid in enumerate(participants(log)):
        trials = participant_trials(log, pid)
        own = dataclasses.replace(context, horizon=len(trials))
        seeds = [np.random.SeedSequence([seed, i, j]) for j in range(len(specs))]
        jobs.append((list(specs), trials, own, n_starts, seeds, priors, pid, ranges, intervals, warm_start_nested))
    bar = _progress(len(jobs) * len(specs), "fitting", progress)
    rows = []
    if n_jobs <= 1:
        for job in jobs:
            rows.extend(_job(job))
            bar.update(len(specs))
    else:
        with ProcessPoolExecutor(max_workers=n_jobs, mp_context=multiprocessing.get_context("spawn")) as pool:
            for part in pool.map(_job, jobs, chunksize=max(1, len(jobs) // (8 * n_jobs))):
                rows.extend(part)
                bar.update(len(specs))
    bar.close()
    return pd.DataFrame(rows)


def _progress(total: int, desc: str, enabled: bool):
    from tqdm.auto import tqdm

    return tqdm(total=total, desc=desc, disable=not enabled, leave=False)


def context_for(log: pd.DataFrame, command_names: Sequence[str], world: Any = None) -> AgentContext:
    """Agent context for fitting a log: its command set, the longest participant history and
    (optionally) the study's world, for agents that plan with it."""
    horizon = int(log.groupby("participant").size().max())
    return AgentContext(len(command_names), horizon, tuple(command_names), world=world)


def fitted_agent(spec: ModelSpec, fit_row: Mapping[str, Any], context: AgentContext) -> Agent:
    """The agent of ``spec`` with the fitted parameters of one row of :func:`fit_log`'s table."""
    specs = spec.build(context).param_specs()
    params = {n: float(fit_row[f"param_{n}"]) for n in specs if n not in spec.fixed}
    return spec.build(context, **params)
