"""Trust checks: parameter recovery, model recovery, mechanism knock-out.

Following Wilson & Collins (2019), eLife 8:e49547, "Ten simple rules for the computational
modeling of behavioral data" (rules 5 and 6): simulate with known parameters and refit
(correlation and bias per parameter), build the confusion matrix of which model wins (lowest
BIC) on data simulated by each model, and compare a model with versions lacking one mechanism.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import ComposedAgent
from shortcut_gym.agents.learning import COMPOSED
from shortcut_gym.agents.registry import make_agent
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World
from shortcut_gym.lab.checks.population import ModelPopulation
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import validate_log
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_log
from shortcut_gym.lab.fitting.starts import check_ranges, draw_in_range


def correlation_or_nan(x: np.ndarray, y: np.ndarray) -> float:
    """Pearson correlation of ``x`` and ``y``; NaN where it is undefined: fewer than two values, or
    either side constant (tested exactly, since a float standard deviation of equal values can come out
    as 1e-17 rather than 0 and give a meaningless number)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    if len(x) < 2 or np.ptp(x) == 0 or np.ptp(y) == 0:
        return float("nan")
    return float(np.corrcoef(x, y)[0, 1])


def draw_parameters(spec: ModelSpec, rng: np.random.Generator,
                    ranges: Mapping[str, tuple[float, float]] | None = None) -> dict[str, float]:
    """Known generating parameters: each drawn over its plausible range (``ranges[name]`` if given,
    else the parameter's documented ``ParamSpec.plausible``; :func:`~shortcut_gym.lab.fitting.plausible_range`),
    uniformly in the optimiser's coordinate (log-uniform for a log-transformed rate)."""
    specs = spec.build().param_specs()
    check_ranges(specs, ranges, f"model {spec.label!r}")
    return {n: draw_in_range(specs[n], rng, ranges) for n in spec.free_parameters()}


def simulate_known(world: World, spec: ModelSpec, n_participants: int, rng: np.random.Generator,
                   ranges: Mapping[str, tuple[float, float]] | None = None,
                   prefix: str = "sim", population: ModelPopulation | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """A log of ``n_participants`` simulated users, each with its own drawn parameters (from
    ``population``'s laws if given, else :func:`draw_parameters` over ``ranges``).

    Returns (log, truth) with truth one row per participant of the generating parameters.
    """
    frames, truth = [], []
    for i in range(n_participants):
        params = population.draw(rng) if population is not None else draw_parameters(spec, rng, ranges)
        agent_spec = ModelSpec(spec.name, spec.label, spec.options, {**dict(spec.fixed), **params})
        log = simulate_log(world, agent_spec, 1, rng, prefix=f"{prefix}{i}")
        frames.append(log.assign(participant=f"{prefix}{i}"))  # one user per participant: <prefix><index>
        truth.append({"participant": f"{prefix}{i}", **params})
    return pd.concat(frames, ignore_index=True), pd.DataFrame(truth)


def parameter_recovery(world: World, spec: ModelSpec, n_participants: int = 20, seed: int = 0,
                       n_starts: int = 5, n_jobs: int = 1,
                       ranges: Mapping[str, tuple[float, float]] | None = None,
                       progress: bool = False, population: ModelPopulation | None = None,
                       ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Simulate with known parameters (``population`` or ``ranges``), refit; returns
    (per-participant true vs fitted, summary).

    Summary per parameter: Pearson correlation, Spearman rank correlation (robust to the few fits
    that run far along a flat direction), mean bias (fitted - true), RMSE, true-value spread,
    the share of 95% intervals holding the true value, and how the true values were drawn. A
    parameter whose true value is the same for everyone (held fixed in the population) has true_sd 0
    and both correlations NaN (undefined); its bias and RMSE still say where the fits landed.
    """
    rng = np.random.default_rng(seed)
    log, truth = simulate_known(world, spec, n_participants, rng, ranges, population=population)
    log = validate_log(log, world.commands, source=f"simulated {spec.label}")
    fits = fit_log(log, [spec], context_for(log, world.commands.names, world), n_starts, seed, n_jobs,
                   progress=progress)
    merged = truth.merge(fits, on="participant")
    drawn = (population or ModelPopulation(spec, n_participants, {}, "plausible ranges")).describe()
    if population is None and ranges:
        drawn.update({n: f"uniform over [{lo:g}, {hi:g}] in the optimiser's coordinate"
                      for n, (lo, hi) in ranges.items()})
    rows = []
    for n in spec.free_parameters():
        t, f = merged[n].to_numpy(float), merged[f"param_{n}"].to_numpy(float)
        held = bool(np.ptp(t) == 0)  # the same true value for everyone (held fixed in the population)
        r = correlation_or_nan(t, f)
        rank_r = correlation_or_nan(pd.Series(t).rank().to_numpy(), pd.Series(f).rank().to_numpy())
        lo = merged.get(f"lower_{n}", pd.Series(np.nan, index=merged.index)).to_numpy(float)
        hi = merged.get(f"upper_{n}", pd.Series(np.nan, index=merged.index)).to_numpy(float)
        has = ~np.isnan(lo) & ~np.isnan(hi)  # an end may be infinite: a side the data did not limit
        covered = float(np.mean((lo[has] <= t[has]) & (t[has] <= hi[has]))) if has.any() else float("nan")
        rows.append({"model": spec.label, "parameter": n, "correlation": r, "rank_correlation": rank_r,
                     "bias": float(np.mean(f - t)),
                     "rmse": float(np.sqrt(np.mean((f - t) ** 2))),
                     "true_sd": 0.0 if held and len(t) > 1 else float(t.std(ddof=1)),
                     "interval_coverage": covered, "n": len(t), "drawn": drawn[n]})
    pairs = pd.DataFrame([{"model": spec.label, "participant": row["participant"], "parameter": n,
                           "true": row[n], "fitted": row[f"param_{n}"]}
                          for _, row in merged.iterrows() for n in spec.free_parameters()])
    return pairs, pd.DataFrame(rows)


def model_recovery(world: World, specs: Sequence[ModelSpec], n_participants: int = 10, seed: int = 0,
                   n_starts: int = 3, n_jobs: int = 1,
                   ranges: Mapping[str, Mapping[str, tuple[float, float]]] | None = None,
                   progress: bool = False, populations: Mapping[str, ModelPopulation] | None = None,
                   ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Confusion matrix: rows = generating model, columns = model with the lowest BIC (fractions).

    Returns (confusion matrix, all fits with a ``generator`` column).
    """
    rng = np.random.default_rng(seed)
    ranges = ranges or {}
    all_fits = []
    for g, gen in enumerate(specs):
        pop = (populations or {}).get(gen.label)
        log, _ = simulate_known(world, gen, pop.participants if pop else n_participants, rng, ranges.get(gen.label),
                                prefix=f"g{g}s", population=pop)
        log = validate_log(log, world.commands, source=f"simulated {gen.label}")
        fits = fit_log(log, specs, context_for(log, world.commands.names, world), n_starts, seed + 1000 * (g + 1),
                       n_jobs, progress=progress)
        fits.insert(0, "generator", gen.label)
        all_fits.append(fits)
    fits = pd.concat(all_fits, ignore_index=True)
    best = fits.loc[fits.groupby(["generator", "participant"])["bic"].idxmin()]
    labels = [s.label for s in specs]
    confusion = pd.crosstab(best["generator"], best["model"], normalize="index")
    confusion = confusion.reindex(index=labels, columns=labels, fill_value=0.0)
    confusion.index.name, confusion.columns.name = "generator", "winner"
    return confusion, fits


def knockout_variants(spec: ModelSpec) -> list[tuple[str, ModelSpec]]:
    """(mechanism, spec without it) for every mechanism of ``spec`` that can be switched off alone.

    Each variant is a ``composed_learner`` with the remaining mechanisms (for a published model
    that is again a published form, e.g. ``rw_choice_kernel`` without ``choice_kernel`` is the
    delta rule of ``rescorla_wagner``).
    """
    agent = spec.build()
    mechanisms = list(agent.mechanisms) if isinstance(agent, ComposedAgent) else []
    if not mechanisms:
        raise ConfigError(f"model {spec.label!r} ({spec.name}) has no switchable mechanisms to knock out")
    out = []
    for m in mechanisms:
        options: dict[str, Any] = {k: v for k, v in spec.options.items() if k != "mechanisms"}
        options["mechanisms"] = [x for x in mechanisms if x != m]
        try:
            kept = set(make_agent(COMPOSED, None, **options).param_specs())
        except ConfigError:
            continue  # another mechanism needs this one, or nothing would choose
        fixed = {k: v for k, v in spec.fixed.items() if k in kept}
        out.append((m, ModelSpec(COMPOSED, f"{spec.label}-no_{m}", options, fixed)))
    if not out:
        raise ConfigError(f"model {spec.label!r} ({spec.name}) has no mechanism that can be knocked out alone "
                          f"(mechanisms {mechanisms})")
    return out


def knockout_study(log: pd.DataFrame, spec: ModelSpec, world: World, n_starts: int = 5, seed: int = 0,
                   n_jobs: int = 1, progress: bool = False) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Refit ``spec`` and each one-mechanism knock-out on ``log`` (validated).

    Returns (summary per knocked-out mechanism: summed BIC change vs the full model, positive =
    the mechanism earns its parameters; participants whose BIC got worse), and all fits.
    """
    variants = knockout_variants(spec)
    specs = [spec] + [v for _, v in variants]
    fits = fit_log(log, specs, context_for(log, world.commands.names, world), n_starts, seed, n_jobs, progress=progress)
    full = fits[fits["model"] == spec.label].set_index("participant")["bic"]
    rows = []
    for mech, v in variants:
        b = fits[fits["model"] == v.label].set_index("participant")["bic"]
        d = (b - full).reindex(full.index)
        rows.append({"mechanism": mech, "model": v.label, "delta_bic": float(d.sum()),
                     "participants_worse": int((d > 0).sum()), "participants": int(len(d))})
    return pd.DataFrame(rows).sort_values("delta_bic", ascending=False).reset_index(drop=True), fits
