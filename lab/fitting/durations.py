"""Participant operator costs from their own logged trial durations.

The world's time model is additive in its operators (Keystroke-Level Model, Card, Moran & Newell
1980, "The keystroke-level model for user performance time with interactive systems", CACM 23(7)):
a trial's predicted time is ``offset + X theta`` where ``X`` counts each fitted operator on the
trial (given its logged action and outcome, the hand position the previous trial left, the
command's menu-selection count and hotkey memory) and ``offset`` holds the terms kept at the base
world's values. Fitted operators (:data:`DURATION_PARAMETERS`):

==================  ====================================================================
mental_s            M, mental preparation (every trial; twice on a wrong hotkey)
keystroke_s         K, one keystroke (hotkey keys; the undo keys of a wrong hotkey)
point_s             P, pointing to the menu header (every menu path)
home_s              H, homing the hand between keyboard and mouse
encoding_s          encoding time of a deliberate learn trial
latency_factor_s    F of the ACT-R retrieval latency F e^-A (recalled: A the command's
                    activation; failed: A = tau, Anderson & Lebiere 1998)
==================  ====================================================================

Held at the base world's values, and why (our call): the button time B (always 4 B with one P
on a menu path, so not separable from P); the menu model's search, decision and Fitts pointing
terms (per-command constants of the menu layout); the commission share and undo key count
(counts, not times); the memory dynamics (decay, threshold, noise, trace weights), which set the
activation the latency term reads. An operator that never occurs in a participant's trials (no
learn trial: no ``encoding_s``), or only in fixed proportion to operators listed before it (P
beside M when every trial is a menu), is not identified: it keeps the base value and gets no
standard error (:func:`identified_columns`).

Duration likelihoods: ``lognormal`` (default), d ~ LogNormal(ln mu - sigma^2 / 2, sigma), so the
mean is the predicted time mu and the coefficient of variation is sqrt(exp(sigma^2) - 1) (the
world's optional trial-time noise has this form); ``gaussian``, d ~ N(mu, sigma^2), whose maximum
likelihood estimate is the least-squares regression of (d - offset) on the operator counts.
Standard errors: inverse observed information (lognormal), the OLS covariance (gaussian).

Every operator time is kept at or above :data:`MIN_OPERATOR_S`: where the unconstrained optimum
puts one below it (the data trade K against M and P, and push K under zero), the fit is the
constrained maximum (bounded least squares for ``gaussian``, the bounded likelihood for
``lognormal``); the operator is then named in ``at_floor`` and has no standard error, and the
others' standard errors are those of the fit with it held there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import pandas as pd
from scipy import optimize

from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.costs import CostSettings
from shortcut_gym.envs.errors import ShortcutGymError
from shortcut_gym.envs.memory import MemorySettings
from shortcut_gym.envs.world import World
from shortcut_gym.lab.data.logs import participant_trials, participants, schedule_of
from shortcut_gym.lab.fitting.optimise import single_threaded_blas

DURATION_PARAMETERS: tuple[str, ...] = ("mental_s", "keystroke_s", "point_s", "home_s", "encoding_s",
                                        "latency_factor_s")
DurationNoise = Literal["lognormal", "gaussian"]
_COL = {n: i for i, n in enumerate(DURATION_PARAMETERS)}
#: Smallest fitted operator time (s): the lognormal fit keeps every operator positive.
MIN_OPERATOR_S = 1e-6


class DurationFitError(ShortcutGymError, ValueError):
    """Durations that the duration likelihood cannot use (names the participant and the row)."""


@dataclass(frozen=True)
class OperatorDesign:
    """Per trial: fitted-operator counts ``counts`` (n x 6, :data:`DURATION_PARAMETERS` order),
    the time of the held terms ``offset_s`` (n,), the logged ``duration_s`` (n,)."""

    counts: np.ndarray
    offset_s: np.ndarray
    duration_s: np.ndarray

    def predicted_s(self, theta: np.ndarray) -> np.ndarray:
        """Predicted trial times (s) for operator values ``theta``."""
        return self.offset_s + self.counts @ theta


def base_values(world: World) -> np.ndarray:
    """The world's values of :data:`DURATION_PARAMETERS` (s)."""
    c, m = world.costs, world.memory
    return np.array([c.klm.mental_s, c.klm.k_s, c.klm.point_s, c.klm.home_s, c.learn.encoding_s,
                     m.latency_factor_s])


def operator_design(trials: pd.DataFrame, world: World) -> OperatorDesign:
    """Operator counts of every trial of one participant (a ``participant_trials`` frame).

    Follows the world's step semantics (:func:`shortcut_gym.envs.kernel.step_user`): the hand
    starts on the mouse, a recalled hotkey leaves it on the keyboard, anything else on the mouse;
    the menu expertise of the t-th menu selection of a command is 1 - 1/t; the activation is
    replayed from the logged outcomes with the world's memory model at the memory clock.
    """
    if world.aids.any_on:
        raise DurationFitError("the duration fit models the world without interface aids; this world has aids on "
                               "(their times are not in the operator design)")
    par, ipar = world.parameters()
    cmdc = world.command_constants()
    n_cmd = world.commands.n_commands
    schedule = schedule_of(trials)
    clock = schedule.memory_clock_s(world.memory.gap_time_scale)
    cmd = schedule.command
    if len(cmd) and (cmd.min() < 0 or cmd.max() >= n_cmd):
        raise DurationFitError(f"command index {int(cmd.max())} is outside the world's {n_cmd} commands")
    outcome = trials["outcome"].to_numpy()
    cap = world.trace_capacity([schedule])
    fs = np.zeros((n_cmd, k.N_FS))
    ist = np.zeros((n_cmd, k.N_IS), dtype=np.int64)
    tr = np.zeros((n_cmd, cap, k.N_TRACE))
    weight = {"menu": par[k.W_MENU], "learned": par[k.W_LEARN], "hotkey": par[k.W_HK_OK]}
    fail_x = math.exp(-par[k.P_TAU])
    b4 = 4.0 * par[k.P_B]
    n = len(cmd)
    X = np.zeros((n, len(DURATION_PARAMETERS)))
    off = np.zeros(n)
    on_keyboard = False
    menu_count = np.zeros(n_cmd, dtype=np.int64)

    def menu(i: int, c: int) -> None:
        menu_count[c] += 1
        e = 1.0 - 1.0 / menu_count[c]
        X[i, _COL["point_s"]] += 1.0
        off[i] += b4 + (1.0 - e) * cmdc[c, k.C_SEARCH] + e * cmdc[c, k.C_DECISION] + cmdc[c, k.C_POINTING]

    for i in range(n):
        c, o = int(cmd[i]), str(outcome[i])
        X[i, _COL["mental_s"]] = 1.0
        if o in ("menu", "learned"):
            X[i, _COL["home_s"]] = float(on_keyboard)
            menu(i, c)
            X[i, _COL["encoding_s"]] = float(o == "learned")
            on_keyboard = False
        elif o == "hotkey":
            a = k.activation(ipar, par, fs[c], ist[c], tr[c], clock[i])
            X[i, _COL["home_s"]] = float(not on_keyboard)
            X[i, _COL["keystroke_s"]] = cmdc[c, k.C_KEYS]
            X[i, _COL["latency_factor_s"]] = math.exp(-a)
            on_keyboard = True
        elif o in ("hotkey_forgotten", "hotkey_wrong"):
            X[i, _COL["home_s"]] = float(not on_keyboard) + 1.0  # to the keyboard, then back for the menu
            X[i, _COL["latency_factor_s"]] = fail_x
            if o == "hotkey_wrong":
                X[i, _COL["keystroke_s"]] = cmdc[c, k.C_KEYS] + par[k.P_UNDOK]
                X[i, _COL["mental_s"]] = 2.0
            menu(i, c)
            on_keyboard = False
        else:
            raise DurationFitError(f"trial {i}: unknown outcome {o!r}")
        w = weight.get(o, par[k.W_HK_FAIL])
        k.add_trace(ipar, par, fs[c], ist[c], tr[c], clock[i], w)
    return OperatorDesign(X, off, trials["duration_s"].to_numpy(dtype=float))


def lognormal_logpdf(duration_s: np.ndarray, mean_s: np.ndarray, sigma: float) -> np.ndarray:
    """ln density of d ~ LogNormal(ln mean - sigma^2/2, sigma): mean ``mean_s``, CV sqrt(e^{sigma^2} - 1)."""
    d = np.asarray(duration_s, dtype=float)
    z = np.log(d) - np.log(mean_s) + 0.5 * sigma * sigma
    return -np.log(d) - math.log(sigma) - 0.5 * math.log(2.0 * math.pi) - z * z / (2.0 * sigma * sigma)


def sigma_of_cv(cv: float) -> float:
    """Log-scale sigma of a lognormal with coefficient of variation ``cv``: sqrt(ln(1 + cv^2))."""
    return math.sqrt(math.log1p(cv * cv))


@dataclass
class DurationFit:
    """The duration fit of one participant."""

    participant: str
    noise: str
    estimates: dict[str, float]
    standard_errors: dict[str, float]
    identified: dict[str, bool]
    sigma: float  # lognormal: log-scale sigma; gaussian: sd in seconds
    loglik: float
    n_trials: int
    world: World = field(repr=False)
    at_floor: tuple[str, ...] = ()  # identified operators held at MIN_OPERATOR_S by the constraint

    @property
    def cv(self) -> float:
        """Coefficient of variation of a trial time (lognormal noise; NaN for gaussian)."""
        return math.sqrt(math.expm1(self.sigma ** 2)) if self.noise == "lognormal" else math.nan

    @property
    def n_params(self) -> int:
        """Fitted operators plus the noise scale."""
        return sum(self.identified.values()) + 1

    def row(self) -> dict[str, Any]:
        """One tidy row: participant, noise, ln L, sigma, cv, then ``<name>``, ``se_<name>``."""
        out: dict[str, Any] = {"participant": self.participant, "noise": self.noise, "loglik": self.loglik,
                               "n_params": self.n_params, "n_trials": self.n_trials, "sigma": self.sigma,
                               "cv": self.cv, "at_floor": ";".join(self.at_floor)}
        for name in DURATION_PARAMETERS:
            out[name] = self.estimates[name]
            out[f"se_{name}"] = self.standard_errors[name]
            out[f"identified_{name}"] = self.identified[name]
        return out


def implied_world(world: World, estimates: dict[str, float]) -> World:
    """``world`` with the fitted operator times (unknown names are refused)."""
    unknown = set(estimates) - set(DURATION_PARAMETERS)
    if unknown:
        raise DurationFitError(f"unknown operator(s) {sorted(unknown)}; known: {list(DURATION_PARAMETERS)}")
    base = dict(zip(DURATION_PARAMETERS, base_values(world).tolist(), strict=True)) | dict(estimates)
    costs = world.costs.model_dump()
    costs["klm"].update(keystroke_s=base["keystroke_s"], mental_s=base["mental_s"], point_s=base["point_s"],
                        home_s=base["home_s"])
    costs["learn"]["encoding_s"] = base["encoding_s"]
    memory = world.memory.model_dump()
    memory["latency_factor_s"] = base["latency_factor_s"]
    return world.with_changes(costs=CostSettings.model_validate(costs),
                              memory=MemorySettings.model_validate(memory))


def identified_columns(counts: np.ndarray) -> np.ndarray:
    """Indices of the operators the counts identify: in :data:`DURATION_PARAMETERS` order, each
    column that raises the rank of the ones kept (an operator that never occurs, or one always in
    fixed proportion to those before it, such as P beside M when every trial is a menu, is not)."""
    kept: list[int] = []
    scale = np.abs(counts).max(axis=0)
    for j in range(counts.shape[1]):
        if scale[j] == 0:
            continue
        trial = counts[:, kept + [j]] / scale[kept + [j]]
        if np.linalg.matrix_rank(trial, tol=1e-8 * max(1.0, np.sqrt(len(counts)))) == len(kept) + 1:
            kept.append(j)
    return np.asarray(kept, dtype=np.int64)


def _check_durations(design: OperatorDesign, participant: str, positive: bool) -> None:
    d = design.duration_s
    bad = ~np.isfinite(d) | ((d <= 0) if positive else (d < 0))
    if bad.any():
        i = int(np.argmax(bad))
        need = "> 0 for the lognormal likelihood" if positive else ">= 0"
        raise DurationFitError(f"participant {participant!r}, trial {i}: duration_s {float(d[i])!r} must be finite "
                               f"and {need}")


def fit_durations(trials: pd.DataFrame, world: World, noise: DurationNoise = "lognormal",
                  participant: str = "") -> DurationFit:
    """Maximum-likelihood operator times of one participant (``participant_trials`` frame)."""
    if noise not in ("lognormal", "gaussian"):
        raise DurationFitError(f"noise must be 'lognormal' or 'gaussian', got {noise!r}")
    design = operator_design(trials, world)
    _check_durations(design, participant, noise == "lognormal")
    base = base_values(world)
    free = identified_columns(design.counts)
    X = design.counts[:, free]
    held = np.setdiff1d(np.arange(len(base)), free)
    fixed_s = design.offset_s + design.counts[:, held] @ base[held]  # held operators at the base values
    y = design.duration_s - fixed_s
    n = len(y)
    if n <= len(free):
        raise DurationFitError(f"participant {participant!r}: {n} trials cannot identify {len(free)} operators")
    theta = base.copy()
    se = np.full(len(base), np.nan)
    if noise == "gaussian":
        beta, floor = _least_squares_at_or_above_floor(X, y)
        resid = y - X @ beta
        sigma = math.sqrt(float(resid @ resid) / n)
        inner = ~floor  # the standard errors of the operators off the floor, the others held there
        cov = float(resid @ resid) / (n - int(inner.sum())) * np.linalg.pinv(X[:, inner].T @ X[:, inner])
        theta[free] = beta
        se[free[inner]] = np.sqrt(np.diag(cov))
        ll = float(np.sum(-0.5 * math.log(2 * math.pi * sigma ** 2) - resid ** 2 / (2 * sigma ** 2)))
    else:
        theta_free, sigma, ll, cov = _lognormal_ml(X, y, design.duration_s, fixed_s, base[free])
        theta[free] = theta_free
        se[free] = np.sqrt(np.clip(np.diag(cov), 0.0, np.inf))
        floor = theta_free <= 1.01 * MIN_OPERATOR_S
        se[free[floor]] = np.nan
    estimates = dict(zip(DURATION_PARAMETERS, theta.tolist(), strict=True))
    identified = {name: bool(j in free) for j, name in enumerate(DURATION_PARAMETERS)}
    at_floor = tuple(DURATION_PARAMETERS[j] for j in free[floor])
    return DurationFit(participant, noise, estimates, dict(zip(DURATION_PARAMETERS, se.tolist(), strict=True)),
                       identified, sigma, ll, n, implied_world(world, estimates), at_floor)


def _least_squares_at_or_above_floor(X: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """argmin ||y - X b||^2 subject to b >= MIN_OPERATOR_S, and which b sit on that floor: the OLS
    solution when it satisfies the bound (then exactly OLS), else bounded-variable least squares."""
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    if np.all(beta >= MIN_OPERATOR_S):
        return beta, np.zeros(len(beta), dtype=bool)
    res = optimize.lsq_linear(X, y, bounds=(MIN_OPERATOR_S, np.inf), method="bvls", tol=1e-14)
    floor = res.x <= MIN_OPERATOR_S * (1 + 1e-9)
    beta = np.where(floor, MIN_OPERATOR_S, res.x)
    if (~floor).any():  # the free operators' exact least squares given the floored ones
        rest = y - X[:, floor] @ beta[floor]
        beta[~floor], *_ = np.linalg.lstsq(X[:, ~floor], rest, rcond=None)
    return beta, floor


def _lognormal_ml(X: np.ndarray, y: np.ndarray, d: np.ndarray, fixed_s: np.ndarray,
                  start: np.ndarray) -> tuple[np.ndarray, float, float, np.ndarray]:
    """ML of (theta, sigma) with mu = fixed_s + X theta; returns theta, sigma, ln L, cov(theta)."""
    log_d = np.log(d)
    n, p = X.shape

    def negll_grad(x: np.ndarray) -> tuple[float, np.ndarray]:
        theta, s = x[:p], x[p]
        sigma2 = math.exp(2 * s)
        mu = fixed_s + X @ theta
        if np.any(mu <= 0):
            return 1e300, np.zeros(p + 1)
        z = log_d - np.log(mu) + 0.5 * sigma2
        ll = float(np.sum(-log_d - s - 0.5 * math.log(2 * math.pi) - z * z / (2 * sigma2)))
        g_theta = X.T @ (z / (sigma2 * mu))
        g_s = float(np.sum(-1.0 - z + z * z / sigma2))
        return -ll, -np.r_[g_theta, g_s]

    ols, *_ = np.linalg.lstsq(X, y, rcond=None)
    theta0 = np.where(ols > MIN_OPERATOR_S, ols, np.maximum(start, MIN_OPERATOR_S))
    if np.any(fixed_s + X @ theta0 <= 0):
        theta0 = np.maximum(start, MIN_OPERATOR_S)
    mu0 = fixed_s + X @ theta0
    s0 = math.log(max(float(np.std(log_d - np.log(mu0))), 1e-3))
    bounds = [(MIN_OPERATOR_S, None)] * p + [(-12.0, 3.0)]
    with single_threaded_blas():
        res = optimize.minimize(negll_grad, np.r_[theta0, s0], jac=True, method="L-BFGS-B", bounds=bounds,
                                options={"ftol": 1e-15, "gtol": 1e-10, "maxiter": 2000})
    x = res.x
    # observed information by central differences of the analytic gradient
    h = 1e-6 * np.maximum(np.abs(x), 1e-3)
    H = np.empty((p + 1, p + 1))
    for j in range(p + 1):
        up, dn = x.copy(), x.copy()
        up[j] += h[j]
        dn[j] -= h[j]
        H[:, j] = (negll_grad(up)[1] - negll_grad(dn)[1]) / (2 * h[j])
    H = 0.5 * (H + H.T)
    try:
        cov = np.linalg.inv(H)[:p, :p]
    except np.linalg.LinAlgError:
        cov = np.full((p, p), np.nan)
    return x[:p], math.exp(x[p]), -float(res.fun), cov


def fit_log_durations(log: pd.DataFrame, world: World, noise: DurationNoise = "lognormal"
                      ) -> tuple[pd.DataFrame, dict[str, World]]:
    """Every participant of a validated log: (one row each, participant -> the world they imply)."""
    rows, worlds = [], {}
    for pid in participants(log):
        fit = fit_durations(participant_trials(log, pid), world, noise, pid)
        rows.append(fit.row())
        worlds[pid] = fit.world
    return pd.DataFrame(rows), worlds
