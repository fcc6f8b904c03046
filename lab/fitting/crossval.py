"""Leave-one-session-out cross-validation: predictive log-likelihood of held-out sessions.

For each participant, model and session s, the parameters are fitted (maximum likelihood, the same
multi-start L-BFGS-B over transformed coordinates as :func:`~.optimise.fit_participant`) to the
choices of every other session, and the fitted model predicts the choices of session s. A learning
model still *sees* the held-out trials (their actions and outcomes move its state, as they moved
the participant's): only their choice probabilities are left out of the fit. This is what a
sequential model's held-out likelihood has to be, since later sessions start from the state the
held-out one left behind.

Fast path (agents with a compiled likelihood): the likelihood is a causal sum over trials, so the
log-likelihood of the trials up to the end of session s minus that up to the end of session s - 1
is session s's share; training ln L = full - that share. Each agent is bound to the participant's
whole history (its horizon), so a prefix is scored exactly as inside the full log. Slow path:
per-trial probabilities from the protocol replay (:func:`~.replay.replay_probabilities`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence

import numpy as np
import pandas as pd
from scipy import optimize
from threadpoolctl import threadpool_limits

from shortcut_gym.agents.base import AgentContext
from shortcut_gym.envs.errors import ConfigError, DataError
from shortcut_gym.envs.kernel import ACTION_NAMES
from shortcut_gym.lab.data.logs import participant_trials, participants
from shortcut_gym.lab.fitting.optimise import draw_start, free_box
from shortcut_gym.lab.fitting.replay import loglik_function, replay_probabilities
from shortcut_gym.lab.fitting.specs import ModelSpec

#: f(theta natural, full vector) -> ln L per session (array of the participant's sessions, in order)
SessionLogLik = Callable[[np.ndarray], np.ndarray]


def session_loglik_function(spec: ModelSpec, trials: pd.DataFrame, context: AgentContext) -> SessionLogLik:
    """ln L of each session of one participant's trials (``participant_trials`` frame) given theta.

    ``context`` must have the participant's whole history as horizon.
    """
    session = trials["session"].to_numpy()
    if np.any(np.diff(session) < 0):
        raise DataError("sessions must not decrease along a participant's trials")
    ends = np.flatnonzero(np.r_[session[1:] != session[:-1], True]) + 1  # end (exclusive) of each session
    full, fast = loglik_function(spec, trials, context)
    if fast:
        prefixes = [loglik_function(spec, trials.iloc[:end], context)[0] for end in ends[:-1]] + [full]

        def by_prefix(theta: np.ndarray) -> np.ndarray:
            upto = np.array([f(theta) for f in prefixes])
            return np.diff(np.r_[0.0, upto])

        return by_prefix
    names = list(spec.build(context).param_specs())
    codes = trials["action"].map({n: i for i, n in enumerate(ACTION_NAMES)}).to_numpy(dtype=np.int64)
    starts = np.r_[0, ends[:-1]]

    def by_replay(theta: np.ndarray) -> np.ndarray:
        agent = spec.build(context, **dict(zip(names, map(float, theta), strict=True)))
        p = replay_probabilities(agent, trials, context)[np.arange(len(codes)), codes]
        with np.errstate(divide="ignore"):
            per_trial = np.log(p)
        return np.add.reduceat(per_trial, starts)

    return by_replay


def _fit_without(spec: ModelSpec, by_session: SessionLogLik, context: AgentContext, held_out: int,
                 n_starts: int, rng: np.random.Generator) -> tuple[np.ndarray, float]:
    """ML parameters (natural, full vector) on every session but ``held_out``; (theta, training ln L)."""
    specs = spec.build(context).param_specs()
    free = [n for n in specs if n not in spec.fixed]
    base = np.array([spec.fixed.get(n, specs[n].default) for n in specs], dtype=float)
    where = [list(specs).index(n) for n in free]

    def natural(x: np.ndarray) -> np.ndarray:
        theta = base.copy()
        for j, n in enumerate(free):
            theta[where[j]] = specs[n].from_free(float(x[j]))
        return theta

    def objective(x: np.ndarray) -> float:
        per = by_session(natural(x))
        value = float(per.sum() - per[held_out])
        return -value if np.isfinite(value) else 1e12

    if not free:
        per = by_session(base)
        return base, float(per.sum() - per[held_out])
    boxes = [free_box(specs[n]) for n in free]
    best = None
    for i in range(n_starts):
        start = [specs[n].default if i == 0 else draw_start(specs[n], rng) for n in free]
        x0 = np.array([np.clip(specs[n].to_free(v), *box) for n, v, box in zip(free, start, boxes, strict=True)])
        res = optimize.minimize(objective, x0, method="L-BFGS-B", bounds=boxes)
        if best is None or res.fun < best.fun:
            best = res
    assert best is not None
    return natural(best.x), -float(best.fun)


def cross_validate(log: pd.DataFrame, specs: Sequence[ModelSpec], context: AgentContext, n_starts: int = 3,
                   seed: int = 0) -> pd.DataFrame:
    """Leave-one-session-out folds of every participant x model of a validated log.

    One row per participant x model x held-out session: ``heldout_loglik`` (ln L of the session's
    choices under the parameters fitted to the others), ``heldout_trials``, ``train_loglik``.
    Fold (participant i, model j, session s) is seeded with SeedSequence([seed, i, j, s]).
    A participant with a single session cannot be cross-validated: ConfigError naming them.
    """
    if n_starts < 1:
        raise ConfigError(f"n_starts must be >= 1, got {n_starts}")
    rows = []
    with threadpool_limits(limits=1, user_api="blas"):
        for i, pid in enumerate(participants(log)):
            trials = participant_trials(log, pid)
            sessions = pd.unique(trials["session"])
            if len(sessions) < 2:
                raise ConfigError(f"participant {pid!r} has one session ({sessions[0]}); leave-one-session-out "
                                  "cross-validation needs at least 2")
            sizes = trials.groupby("session", sort=False).size().to_numpy()
            own = dataclasses.replace(context, horizon=len(trials))  # keeps the world, as fit_log does
            for j, spec in enumerate(specs):
                by_session = session_loglik_function(spec, trials, own)
                for s, session in enumerate(sessions):
                    rng = np.random.default_rng(np.random.SeedSequence([seed, i, j, s]))
                    theta, train = _fit_without(spec, by_session, own, s, n_starts, rng)
                    rows.append({"participant": pid, "model": spec.label, "session": int(session),
                                 "heldout_trials": int(sizes[s]), "heldout_loglik": float(by_session(theta)[s]),
                                 "train_loglik": train})
    return pd.DataFrame(rows)


def cv_table(folds: pd.DataFrame) -> pd.DataFrame:
    """Per participant x model: summed held-out ln L, held-out trials, ln L per trial, rank (1 = best)."""
    t = folds.groupby(["participant", "model"], sort=False).agg(
        heldout_loglik=("heldout_loglik", "sum"), heldout_trials=("heldout_trials", "sum"),
        folds=("session", "size")).reset_index()
    t["loglik_per_trial"] = t["heldout_loglik"] / t["heldout_trials"]
    t["delta_heldout"] = t.groupby("participant")["heldout_loglik"].transform("max") - t["heldout_loglik"]
    t["cv_rank"] = t.groupby("participant")["heldout_loglik"].rank(ascending=False, method="min").astype(int)
    return t


def cv_summary(folds: pd.DataFrame) -> pd.DataFrame:
    """Per model: summed held-out ln L over participants, participants won, gap to the best model."""
    t = cv_table(folds)
    out = t.groupby("model").agg(participants=("participant", "nunique"), heldout_loglik=("heldout_loglik", "sum"),
                                 heldout_trials=("heldout_trials", "sum"),
                                 wins_cv=("cv_rank", lambda r: int((r == 1).sum())))
    out["delta_heldout"] = out["heldout_loglik"].max() - out["heldout_loglik"]
    return out.sort_values("heldout_loglik", ascending=False).reset_index()
