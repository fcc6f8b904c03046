"""Static softmax agent: a multinomial logit over menu, hotkey, learn with no learning rule.

Utility of menu is 0 (reference); utility of action a in {hotkey, learn} is
``b_a + sum_c w_a_c * x_c`` over the chosen per-trial covariates ``x_c``:

* ``log_exposure``: ln(1 + number of earlier trials of the same command);
* ``session``: the trial's session index (0-based).

P(a) = softmax(utilities). With these covariates the model equals a multinomial logit
(McFadden 1974, "Conditional logit analysis of qualitative choice behavior"), so its
maximum-likelihood fit must match any MNLogit routine on the same design matrix.
The likelihood is vectorised with numpy (no per-trial Python loop).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext, ParamSpec, Transition, check_batch_users
from shortcut_gym.agents.frozen_policy import DecisionRule, FrozenBatchPolicy, cdf_of, frozen_policy, uses_session_rule
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.kernel import ACTION_NAMES
from shortcut_gym.envs.seeds import check_seeds

COVARIATES: tuple[str, ...] = ("log_exposure", "session")
#: Plausible intercepts and covariate weights (logit units; assumptions of this project, no source):
#: where fits draw random starts and recovery studies their true values.
PLAUSIBLE_INTERCEPT = (-2.5, 1.0)
PLAUSIBLE_WEIGHT = (-1.0, 1.0)
_CHOICES = ("hotkey", "learn")


def covariate_matrix(command: np.ndarray, session: np.ndarray, covariates: Sequence[str]) -> np.ndarray:
    """Per-trial covariates (n x len(covariates)) from command indices and sessions, in trial order."""
    command = np.asarray(command, dtype=np.int64)
    cols = []
    for name in covariates:
        if name == "log_exposure":
            order = np.argsort(command, kind="stable")
            sorted_cmd = command[order]
            starts = np.r_[0, np.flatnonzero(np.diff(sorted_cmd)) + 1]
            run_start = np.repeat(starts, np.diff(np.r_[starts, len(command)]))
            earlier = np.empty(len(command), dtype=float)
            earlier[order] = np.arange(len(command)) - run_start
            cols.append(np.log1p(earlier))
        elif name == "session":
            cols.append(np.asarray(session, dtype=float))
        else:
            raise ConfigError(f"unknown covariate {name!r}; known: {list(COVARIATES)}")
    return np.column_stack(cols) if cols else np.zeros((len(command), 0))


def _action_codes(action: Any) -> np.ndarray:
    a = np.asarray(action)
    if a.dtype.kind in "iu":
        return a.astype(np.int64)
    lookup = {n: i for i, n in enumerate(ACTION_NAMES)}
    try:
        return np.array([lookup[str(x)] for x in a], dtype=np.int64)
    except KeyError as err:
        raise ConfigError(f"unknown action {err.args[0]!r}; expected one of {list(ACTION_NAMES)}") from None


class StaticSoftmax(Agent):
    """Softmax of fixed per-action intercepts plus linear covariate effects (a multinomial logit)."""

    name = "static_softmax"
    #: the lab passes the one-participant frame itself to :meth:`likelihood_function`
    likelihood_input = "frame"

    def __init__(self, context: AgentContext | None = None, covariates: Sequence[str] = ("log_exposure",),
                 **params: float) -> None:
        if isinstance(covariates, str):
            if "+" in covariates or "," in covariates:
                raise ConfigError(f"{self.name}: covariates take a list of names (on the command line "
                                 f"covariates=[log_exposure,session]), got {covariates!r}")
            covariates = [covariates]
        unknown = [c for c in covariates if c not in COVARIATES]
        if unknown:
            raise ConfigError(f"{self.name}: unknown covariate(s) {unknown}; known: {list(COVARIATES)}")
        if len(set(covariates)) != len(covariates):
            raise ConfigError(f"{self.name}: covariates {list(covariates)} repeat a name")
        self.covariates = tuple(covariates)
        super().__init__(context, **params)

    def param_specs(self) -> dict[str, ParamSpec]:
        specs = {}
        for a in _CHOICES:
            specs[f"b_{a}"] = ParamSpec(f"b_{a}", 0.0, doc=f"utility of {a} relative to menu (logit units)",
                                        plausible=PLAUSIBLE_INTERCEPT)
        for c in self.covariates:
            for a in _CHOICES:
                n = f"w_{a}_{c}"
                specs[n] = ParamSpec(n, 0.0, doc=f"effect of {c} on the utility of {a} (logit units per unit)",
                                     plausible=PLAUSIBLE_WEIGHT)
        return specs

    def coefficient_matrix(self, theta: np.ndarray | None = None) -> np.ndarray:
        """(1 + n_covariates) x 2 coefficients (rows: intercept, covariates; cols: hotkey, learn)."""
        v = np.asarray(list(self.params.values()) if theta is None else theta, dtype=float)
        return v.reshape(1 + len(self.covariates), 2)

    # ---- protocol -------------------------------------------------------------------------
    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        self.exposures: dict[int, int] = {}

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        """P(menu, hotkey, learn) of the upcoming trial: reads ``info['target']`` and, for the
        session covariate, ``info['next_session']`` (the upcoming trial's session, never the
        finished trial's ``session``; see :mod:`shortcut_gym.envs.info`)."""
        session = 0
        if "session" in self.covariates:
            if "next_session" not in info:
                raise ConfigError(f"{self.name}: the session covariate reads info['next_session'] (the upcoming "
                                  f"trial's session); the info given has only {sorted(info)}")
            session = int(info["next_session"])
        uses = np.array([self.exposures.get(int(info["target"]), 0)], dtype=np.int64)
        return self.probability_rows(uses, np.array([session], dtype=np.int64))[0]

    def probability_rows(self, uses: np.ndarray, session: np.ndarray) -> np.ndarray:
        """(N, 3) P(menu, hotkey, learn) given the target's earlier uses (N,) and the session (N,).

        The acting path (one row) and the batch policy's tables (many rows) both compute here, row
        by row with the same elementwise operations, so they agree bit for bit."""
        features = [np.ones(len(uses))]
        for c in self.covariates:
            features.append(np.log1p(np.asarray(uses, dtype=np.float64)) if c == "log_exposure"
                            else np.asarray(session, dtype=np.float64))
        coef = self.coefficient_matrix()
        full = np.zeros((len(uses), 3))
        for j, x in enumerate(features):
            full[:, 1:] += x[:, None] * coef[j]
        full -= full.max(axis=1, keepdims=True)
        p = np.exp(full)
        return p / p.sum(axis=1, keepdims=True)

    def observe(self, transition: Transition) -> None:
        c = int(transition.info["command"])
        self.exposures[c] = self.exposures.get(c, 0) + 1

    def spec(self) -> dict[str, Any]:
        return {"name": self.name, "covariates": list(self.covariates), "params": dict(self.params)}

    # ---- fast likelihood ------------------------------------------------------------------
    def likelihood_function(self, trials: Any):
        """f(theta) -> log-likelihood of one participant's trials, vectorised over trials.

        ``trials``: a frame or an object with ``command`` (int index), ``action`` (names or codes)
        and, for the session covariate, ``session``. Theta is in ``param_specs()`` order.
        f also accepts a (starts x k) array and then returns one log-likelihood per row.
        """
        get = (lambda k: trials[k].to_numpy()) if isinstance(trials, pd.DataFrame) else (
            lambda k: np.asarray(getattr(trials, k)))
        command = get("command")
        session = get("session") if "session" in self.covariates else np.zeros(len(command))
        x = np.column_stack([np.ones(len(command)), covariate_matrix(command, session, self.covariates)])
        y = _action_codes(get("action"))
        k = 2 * x.shape[1]

        rows = np.arange(len(y))
        p = x.shape[1]

        def loglik(theta: np.ndarray) -> float | np.ndarray:
            t = np.asarray(theta, dtype=float)
            if t.ndim == 1:
                u = x @ t.reshape(p, 2)  # trials x (hotkey, learn); menu utility is 0
                lse = np.logaddexp(0.0, np.logaddexp(u[:, 0], u[:, 1]))
                chosen = np.where(y == 0, 0.0, u[rows, np.maximum(y - 1, 0)])
                return float((chosen - lse).sum())
            return np.array([loglik(row) for row in t.reshape(-1, k)])

        return loglik

    # ---- batched simulation ---------------------------------------------------------------
    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> FrozenBatchPolicy:
        """Compiled policy of ``n_users`` users; user i draws what ``reset(seeds[i])`` would
        (action probabilities tabulated by the target's use count and the session)."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        return frozen_policy(self, n_users, seeds, self._rule)

    def _rule(self, uses_rows: int, sessions: int) -> DecisionRule:
        rows = uses_rows if "log_exposure" in self.covariates else 1
        cols = sessions if "session" in self.covariates else 1
        uses, session = np.meshgrid(np.arange(rows), np.arange(cols), indexing="ij")
        p = self.probability_rows(uses.ravel(), session.ravel())
        return uses_session_rule(cdf_of(p).reshape(rows, cols, 3))
