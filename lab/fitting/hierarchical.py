"""Hierarchical fits of agents to trial logs: Gaussian group priors on the transformed parameters.

A model's free parameters are mapped to the optimiser's unbounded coordinates by each
parameter's transform (logit for two-sided bounds, log for a lower bound), where a Gaussian group
prior N(mu, Sigma) holds; :func:`~.laplace_em.em_laplace` fits it by EM with a Laplace
approximation per participant (Huys et al. 2011, PLoS Computational Biology 7(4), e1002028). The
log-likelihoods are the lab's own (:func:`~.replay.loglik_function`, compiled where the agent has
one). Reported: the group mean and SD (unbounded coordinates, and the group median in natural
units), each participant's MAP with its posterior SD (natural units by the delta method), the
summed Laplace evidence and the integrated BIC.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import AgentContext, ParamSpec
from shortcut_gym.envs.errors import ConfigError, NotReadyError
from shortcut_gym.lab.data.logs import participant_trials, participants
from shortcut_gym.lab.fitting.laplace_em import EMResult, FreeLogLik, em_laplace, sampled_log_evidence
from shortcut_gym.lab.fitting.optimise import free_box
from shortcut_gym.lab.fitting.replay import loglik_function
from shortcut_gym.lab.fitting.specs import ModelSpec

#: Tolerance of the EM loop on the summed Laplace evidence (nats): far below the differences of a few
#: nats that decide a comparison (an assumption of this project, no source).
EVIDENCE_TOLERANCE = 0.01


def natural_slope(s: ParamSpec, x: float, step: float = 1e-6) -> float:
    """d natural / d unbounded coordinate at ``x`` (central difference), for delta-method SDs."""
    return (s.from_free(x + step) - s.from_free(x - step)) / (2.0 * step)


@dataclass
class HierarchicalFit:
    """One model fitted hierarchically to every participant of a log."""

    model: str
    specs: dict[str, ParamSpec]  # the free parameters, in order
    participants: list[str]
    n_trials: list[int]
    em: EMResult
    functions: list[FreeLogLik] = field(default_factory=list, repr=False)  # ln L_i of unbounded coordinates

    @property
    def ibic(self) -> float:
        """Integrated BIC (Huys et al. 2011)."""
        return self.em.ibic

    def sampled_evidence(self, draws: int = 2000, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
        """Per participant: ln p(D_i | group prior) by sampling the fitted prior (Huys et al. 2011's
        estimate), and its standard error; a check of the Laplace evidence the iBIC uses."""
        if len(self.functions) != len(self.participants):
            raise NotReadyError("this fit kept no log-likelihood functions to sample")
        rng = np.random.default_rng(seed)
        out = [sampled_log_evidence(f, self.em.mean, self.em.cov, draws, rng) for f in self.functions]
        return np.array([v for v, _ in out]), np.array([se for _, se in out])

    def group_table(self) -> pd.DataFrame:
        """Per parameter: group mean and SD (unbounded coordinates), transform, group median and the
        interval holding 95% of participants (natural units; the transform of mean -+ 1.96 SD)."""
        rows = []
        for j, (name, s) in enumerate(self.specs.items()):
            mean, sd = float(self.em.mean[j]), math.sqrt(float(self.em.cov[j, j]))
            rows.append({"model": self.model, "parameter": name, "transform": s.transform, "mean_free": mean,
                         "sd_free": sd, "median": s.from_free(mean), "low_95": s.from_free(mean - 1.96 * sd),
                         "high_95": s.from_free(mean + 1.96 * sd)})
        return pd.DataFrame(rows)

    def participant_table(self) -> pd.DataFrame:
        """Per participant: MAP (``param_<name>``, natural), posterior SD (``sd_<name>``, delta method),
        the same in unbounded coordinates (``free_<name>``, ``free_sd_<name>``), ln L at the MAP and
        the Laplace evidence."""
        rows = []
        for pid, n, post in zip(self.participants, self.n_trials, self.em.posteriors, strict=True):
            row: dict[str, Any] = {"participant": pid, "model": self.model, "n_trials": n, "loglik": post.loglik,
                                   "log_evidence": post.log_evidence, "hessian_repaired": post.hessian_repaired}
            for j, (name, s) in enumerate(self.specs.items()):
                x, sd = float(post.mode[j]), float(post.sd[j])
                row[f"param_{name}"] = s.from_free(x)
                row[f"sd_{name}"] = abs(natural_slope(s, x)) * sd
                row[f"free_{name}"] = x
                row[f"free_sd_{name}"] = sd
            rows.append(row)
        return pd.DataFrame(rows)

    def summary(self) -> dict[str, Any]:
        """One row: the model's evidence, iBIC and how the EM loop ended."""
        return {"model": self.model, "participants": len(self.participants), "n_trials": int(sum(self.n_trials)),
                "n_params": len(self.specs), "n_group_params": self.em.n_group_params,
                "log_evidence": self.em.log_evidence, "ibic": self.ibic, "iterations": self.em.iterations,
                "converged": self.em.converged}


def _free_loglik(spec: ModelSpec, trials: pd.DataFrame, context: AgentContext) -> tuple[FreeLogLik, dict]:
    """ln L of one participant as a function of the free parameters' unbounded coordinates."""
    f, _ = loglik_function(spec, trials, context)
    specs = spec.build(context).param_specs()
    free = [n for n in specs if n not in spec.fixed]
    base = np.array([spec.fixed.get(n, specs[n].default) for n in specs], dtype=float)
    where = [list(specs).index(n) for n in free]
    transforms = [specs[n] for n in free]

    def loglik(x: np.ndarray) -> float:
        theta = base.copy()
        for j, s in enumerate(transforms):
            theta[where[j]] = s.from_free(float(x[j]))
        return float(f(theta))

    return loglik, {n: specs[n] for n in free}


def fit_hierarchical(log: pd.DataFrame, spec: ModelSpec, context: AgentContext, n_starts: int = 3, seed: int = 0,
                     covariance: str = "diagonal", tolerance: float = EVIDENCE_TOLERANCE,
                     max_iterations: int = 200) -> HierarchicalFit:
    """Fit ``spec`` hierarchically to every participant of a validated log.

    The group prior starts at the parameters' defaults (unbounded coordinates) with variance 10;
    ``n_starts`` starts per participant in the first E step. Each participant gets its own context
    (its own history length as horizon), as :func:`~.runner.fit_log`.
    """
    ids = participants(log)
    if len(ids) < 2:
        raise ConfigError(f"a hierarchical fit needs at least 2 participants, the log has {len(ids)}")
    functions, counts = [], []
    specs: dict[str, ParamSpec] = {}
    for pid in ids:
        trials = participant_trials(log, pid)
        own = replace(context, horizon=len(trials))  # keeps the world, as fit_log does
        f, specs = _free_loglik(spec, trials, own)
        functions.append(f)
        counts.append(len(trials))
    if not specs:
        raise ConfigError(f"model {spec.label!r} has no free parameters to fit hierarchically")
    start = np.array([s.to_free(s.default) for s in specs.values()])
    bounds = [free_box(s) for s in specs.values()]
    em = em_laplace(functions, counts, start, 10.0, bounds, covariance, tolerance, max_iterations, n_starts,
                    np.random.default_rng(np.random.SeedSequence([seed, 15])))
    return HierarchicalFit(spec.label, specs, ids, counts, em, functions)


def fit_hierarchical_models(log: pd.DataFrame, specs: Sequence[ModelSpec], context: AgentContext,
                            n_starts: int = 3, seed: int = 0, covariance: str = "diagonal",
                            tolerance: float = EVIDENCE_TOLERANCE) -> tuple[pd.DataFrame, dict[str, HierarchicalFit]]:
    """Every model fitted hierarchically: (summary table sorted by iBIC with ``delta_ibic``, fits by label).

    Models without free parameters are left out of the hierarchical comparison.
    """
    fits = {s.label: fit_hierarchical(log, s, context, n_starts, seed, covariance, tolerance)
            for s in specs if s.free_parameters()}
    if not fits:
        raise ConfigError(f"no model with free parameters to fit hierarchically among {[s.label for s in specs]}")
    table = pd.DataFrame([f.summary() for f in fits.values()]).sort_values("ibic").reset_index(drop=True)
    table["delta_ibic"] = table["ibic"] - table["ibic"].min()
    return table, fits


def hierarchical_tables(fits: Mapping[str, HierarchicalFit]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The tables of :func:`fit_hierarchical_models`' fits across models: (group mean and SD per
    model x parameter, MAP and posterior SD per participant x model x parameter)."""
    groups = pd.concat([f.group_table() for f in fits.values()], ignore_index=True)
    participants = pd.concat([f.participant_table() for f in fits.values()], ignore_index=True)
    return groups, participants
