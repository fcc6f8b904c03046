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
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import validate_log
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_log


def draw_parameters(spec: ModelSpec, rng: np.random.Generator,
                    ranges: Mapping[str, tuple[float, float]] | None = None) -> dict[str, float]:
    """Known generating parameters: uniform in ``ranges[name]`` if given, else near the default.

    Near the default means uniform within +-1 of the default in the optimiser's coordinate
    (logit or log transform; natural units for untransformed parameters): the plausible region a
    recovery study should cover, not the whole bounded range (common practice, no source).
    """
    specs = spec.build().param_specs()
    ranges = dict(ranges or {})
    unknown = set(ranges) - set(specs)
    if unknown:
        raise ConfigError(f"model {spec.label!r}: ranges for unknown parameter(s) {sorted(unknown)}")
    out = {}
    for n in spec.free_parameters():
        if n in ranges:
            lo, hi = ranges[n]
            if not (specs[n].lower <= lo <= hi <= specs[n].upper):
                raise ConfigError(f"range {n}=({lo}, {hi}) is outside the bounds [{specs[n].lower}, {specs[n].upper}]")
            out[n] = float(rng.uniform(lo, hi))
        else:
            s = specs[n]
            out[n] = float(s.from_free(s.to_free(s.default) + rng.uniform(-1.0, 1.0)))
    return out


def simulate_known(world: World, spec: ModelSpec, n_participants: int, rng: np.random.Generator,
                   ranges: Mapping[str, tuple[float, float]] | None = None,
                   prefix: str = "sim") -> tuple[pd.DataFrame, pd.DataFrame]:
    """A log of ``n_participants`` simulated users, each with its own drawn parameters.

    Returns (log, truth) with truth one row per participant of the generating parameters.
    """
    frames, truth = [], []
    for i in range(n_participants):
        params = draw_parameters(spec, rng, ranges)
        agent_spec = ModelSpec(spec.name, spec.label, spec.options, {**dict(spec.fixed), **params})
        log = simulate_log(world, agent_spec, 1, rng, prefix=f"{prefix}{i}")
        frames.append(log)
        truth.append({"participant": f"{prefix}{i}-0", **params})
    return pd.concat(frames, ignore_index=True), pd.DataFrame(truth)


def parameter_recovery(world: World, spec: ModelSpec, n_participants: int = 20, seed: int = 0,
                       n_starts: int = 5, n_jobs: int = 1,
                       ranges: Mapping[str, tuple[float, float]] | None = None,
                       progress: bool = False) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Simulate with known parameters, refit; returns (per-participant true vs fitted, summary).

    Summary per parameter: Pearson correlation, mean bias (fitted - true), RMSE, true-value spread.
    """
    rng = np.random.default_rng(seed)
    log, truth = simulate_known(world, spec, n_participants, rng, ranges)
    log = validate_log(log, world.commands, source=f"simulated {spec.label}")
    fits = fit_log(log, [spec], context_for(log, world.commands.names), n_starts, seed, n_jobs, progress=progress)
    merged = truth.merge(fits, on="participant")
    rows = []
    for n in spec.free_parameters():
        t, f = merged[n].to_numpy(float), merged[f"param_{n}"].to_numpy(float)
        r = float(np.corrcoef(t, f)[0, 1]) if t.std() > 0 and f.std() > 0 else float("nan")
        rows.append({"model": spec.label, "parameter": n, "correlation": r, "bias": float(np.mean(f - t)),
                     "rmse": float(np.sqrt(np.mean((f - t) ** 2))), "true_sd": float(t.std(ddof=1)),
                     "n": len(t)})
    pairs = pd.DataFrame([{"model": spec.label, "participant": row["participant"], "parameter": n,
                           "true": row[n], "fitted": row[f"param_{n}"]}
                          for _, row in merged.iterrows() for n in spec.free_parameters()])
    return pairs, pd.DataFrame(rows)


def model_recovery(world: World, specs: Sequence[ModelSpec], n_participants: int = 10, seed: int = 0,
                   n_starts: int = 3, n_jobs: int = 1,
                   ranges: Mapping[str, Mapping[str, tuple[float, float]]] | None = None,
                   progress: bool = False) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Confusion matrix: rows = generating model, columns = model with the lowest BIC (fractions).

    Returns (confusion matrix, all fits with a ``generator`` column).
    """
    rng = np.random.default_rng(seed)
    ranges = ranges or {}
    all_fits = []
    for g, gen in enumerate(specs):
        log, _ = simulate_known(world, gen, n_participants, rng, ranges.get(gen.label), prefix=f"g{g}s")
        log = validate_log(log, world.commands, source=f"simulated {gen.label}")
        fits = fit_log(log, specs, context_for(log, world.commands.names), n_starts, seed + 1000 * (g + 1), n_jobs,
                       progress=progress)
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
    """(mechanism, spec without it) for every mechanism of ``spec`` that can be switched off alone."""
    agent = spec.build()
    mechanisms = list(agent.mechanisms) if isinstance(agent, ComposedAgent) else []
    if not mechanisms:
        raise ConfigError(f"model {spec.label!r} ({spec.name}) has no switchable mechanisms to knock out")
    out = []
    for m in mechanisms:
        options: dict[str, Any] = {k: v for k, v in spec.options.items() if k not in ("mechanisms", "without")}
        options["mechanisms"] = [x for x in mechanisms if x != m]
        try:
            kept = set(spec.build().__class__(None, **options).param_specs())
            fixed = {k: v for k, v in spec.fixed.items() if k in kept}
            out.append((m, ModelSpec(spec.name, f"{spec.label}-no_{m}", options, fixed)))
        except ValueError:
            continue  # another mechanism needs this one, or nothing would choose
    return out


def knockout_study(log: pd.DataFrame, spec: ModelSpec, world: World, n_starts: int = 5, seed: int = 0,
                   n_jobs: int = 1, progress: bool = False) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Refit ``spec`` and each one-mechanism knock-out on ``log`` (validated).

    Returns (summary per knocked-out mechanism: summed BIC change vs the full model, positive =
    the mechanism earns its parameters; participants whose BIC got worse), and all fits.
    """
    variants = knockout_variants(spec)
    specs = [spec] + [v for _, v in variants]
    fits = fit_log(log, specs, context_for(log, world.commands.names), n_starts, seed, n_jobs, progress=progress)
    full = fits[fits["model"] == spec.label].set_index("participant")["bic"]
    rows = []
    for mech, v in variants:
        b = fits[fits["model"] == v.label].set_index("participant")["bic"]
        d = (b - full).reindex(full.index)
        rows.append({"mechanism": mech, "model": v.label, "delta_bic": float(d.sum()),
                     "participants_worse": int((d > 0).sum()), "participants": int(len(d))})
    return pd.DataFrame(rows).sort_values("delta_bic", ascending=False).reset_index(drop=True), fits
