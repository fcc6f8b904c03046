"""Maximum-likelihood (and MAP) fitting of agents to trial logs, one participant at a time.

* Fast path: an agent offering ``likelihood_function(trials)`` (CONTRACTS.md) returns a compiled
  or vectorised f(theta) -> log-likelihood over the natural parameter vector.
* Slow path: any agent of the protocol, replayed trial by trial through ``action_probabilities``
  and ``observe`` with the info dicts documented in agents/base.py (and the observation vector
  rebuilt from the log).

The optimiser (scipy.optimize.minimize, L-BFGS-B) works on unbounded coordinates given by each
parameter's transform (logit for two-sided bounds, log for lower bounds); starts are drawn from
a seeded generator. AIC = 2k - 2 ln L (Akaike 1974); BIC = k ln n - 2 ln L with n trials
(Schwarz 1978, "Estimating the dimension of a model", Annals of Statistics 6(2)).
"""

from __future__ import annotations

import contextlib
import ctypes
import functools
import math
import multiprocessing
from collections.abc import Callable, Iterator, Mapping, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize, stats

from shortcut_gym.agents.base import Agent, AgentContext, ParamSpec, Transition
from shortcut_gym.agents.learning import TrialArrays
from shortcut_gym.agents.registry import AGENTS, make_agent
from shortcut_gym.envs.kernel import ACTION_NAMES
from shortcut_gym.envs.observation import ObservationLayout
from shortcut_gym.lab.data.logs import participant_trials, participants

#: Half-width of the box L-BFGS-B keeps transformed coordinates in (logit 30 ~ 1e-13 from a bound).
FREE_LIMIT = 30.0
#: Box for unbounded ('none', infinite bounds) parameters, in natural units.
UNBOUNDED_LIMIT = 50.0
LogLik = Callable[[np.ndarray], float]


# ---- information criteria ----------------------------------------------------------------------
def aic(loglik: float, k: int) -> float:
    """Akaike information criterion 2k - 2 ln L (Akaike 1974)."""
    return 2.0 * k - 2.0 * loglik


def bic(loglik: float, k: int, n: int) -> float:
    """Bayesian information criterion k ln n - 2 ln L (Schwarz 1978)."""
    if n < 1:
        raise ValueError(f"BIC needs at least one observation, got n={n}")
    return k * math.log(n) - 2.0 * loglik


# ---- model specifications ----------------------------------------------------------------------
@dataclass(frozen=True)
class ModelSpec:
    """A model to fit: a registered agent name, constructor options, parameters held fixed."""

    name: str
    label: str = ""
    options: Mapping[str, Any] = field(default_factory=dict)
    fixed: Mapping[str, float] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.name not in AGENTS:
            raise ValueError(f"unknown model {self.name!r}; registered agents: {sorted(AGENTS)}")
        if not self.label:
            object.__setattr__(self, "label", self.name)
        specs = self.build().param_specs()
        unknown = set(self.fixed) - set(specs)
        if unknown:
            raise ValueError(f"model {self.label!r}: fixed parameter(s) {sorted(unknown)} unknown; known {list(specs)}")

    def build(self, context: AgentContext | None = None, **params: float) -> Agent:
        """The agent with these options, fixed values and ``params``."""
        return make_agent(self.name, context, **dict(self.options), **{**dict(self.fixed), **params})

    def free_parameters(self) -> list[str]:
        """Names of the fitted parameters, in ``param_specs()`` order."""
        return [n for n in self.build().param_specs() if n not in self.fixed]

    def to_dict(self) -> dict[str, Any]:
        """Plain form for tables and YAML."""
        return {"name": self.name, "label": self.label, "options": dict(self.options), "fixed": dict(self.fixed)}


def _value(text: str) -> Any:
    if "+" in text:
        return [t for t in text.split("+") if t]
    low = text.lower()
    if low in ("true", "yes", "on"):
        return True
    if low in ("false", "no", "off"):
        return False
    try:
        return float(text)
    except ValueError:
        return text


def parse_model(text: str) -> ModelSpec:
    """'[label=]name[:key=value,...]' -> ModelSpec; keys that are parameters are held fixed.

    Example: ``logit2=static_softmax:covariates=log_exposure+session,b_learn=-3``; a value with
    '+' is a list (``mechanisms=value+memory_aware+lapse``).
    """
    label, eq, rest = text.partition("=")
    if not eq or ":" in label:
        label, rest = "", text
    name, _, args = rest.partition(":")
    if not name:
        raise ValueError(f"model {text!r}: missing agent name")
    if name not in AGENTS:
        raise ValueError(f"model {text!r}: unknown agent {name!r}; registered: {sorted(AGENTS)}")
    options: dict[str, Any] = {}
    fixed: dict[str, float] = {}
    for item in filter(None, args.split(",")):
        key, eq2, value = item.partition("=")
        if not eq2 or not key:
            raise ValueError(f"model {text!r}: {item!r} must look like key=value")
        options[key] = _value(value)
    try:
        probe = make_agent(name, **{k: v for k, v in options.items() if not isinstance(v, float)})
    except (TypeError, ValueError) as err:
        raise ValueError(f"model {text!r}: {err}") from None
    for key in list(options):
        if key in probe.param_specs():
            value = options.pop(key)
            if not isinstance(value, float):
                raise ValueError(f"model {text!r}: parameter {key} value {value!r} is not a number")
            fixed[key] = value
    return ModelSpec(name, label or "", options, fixed)


# ---- log replay (slow path) --------------------------------------------------------------------
def _observations(trials: pd.DataFrame, n_commands: int) -> np.ndarray:
    """The env's default observation (one-hot target, no recall probability; the layout of
    :class:`~shortcut_gym.envs.observation.ObservationLayout`) before each logged trial."""
    layout = ObservationLayout(n_commands)
    n = len(trials)
    obs = np.zeros((n, layout.dim), dtype=np.float32)
    at = {name: layout.index(name) for name in layout.feature_names()}
    exposures = np.zeros(n_commands)
    ok = np.zeros(n_commands)
    fail = np.zeros(n_commands)
    learned = np.zeros(n_commands)
    last = np.full(n_commands, np.nan)
    hand = 0.0
    cmd = trials["command"].to_numpy()
    onset = trials["onset_s"].to_numpy()
    outcome = trials["outcome"].to_numpy()
    for t in range(n):
        c = int(cmd[t])
        o = obs[t]
        o[c] = 1.0
        o[at["log1p_exposures"]] = math.log1p(exposures[c])
        if exposures[c] > 0:
            o[at["log1p_seconds_since_last_use"]] = math.log1p(max(onset[t] - last[c], 0.0))
        o[at["log1p_hotkey_successes"]] = math.log1p(ok[c])
        o[at["log1p_hotkey_failures"]] = math.log1p(fail[c])
        o[at["log1p_learn_count"]] = math.log1p(learned[c])
        o[at["hand_on_keyboard"]] = hand
        o[at["horizon_left_fraction"]] = (n - t) / n
        exposures[c] += 1
        last[c] = onset[t]
        if outcome[t] == "hotkey":
            ok[c] += 1
            hand = 1.0
        else:
            hand = 0.0
            if outcome[t] in ("hotkey_forgotten", "hotkey_wrong"):
                fail[c] += 1
            elif outcome[t] == "learned":
                learned[c] += 1
    return obs


def replay_probabilities(agent: Agent, trials: pd.DataFrame, context: AgentContext, seed: int = 0) -> np.ndarray:
    """Per-trial (menu, hotkey, learn) probabilities of ``agent`` on one participant's logged trials.

    ``trials`` is a ``participant_trials`` frame (command as int index). The agent is bound,
    reset with ``seed``, asked for probabilities before each trial and shown the logged trial after.
    """
    agent.bind(context)
    agent.reset(seed)
    names = context.command_names or tuple(str(i) for i in range(context.n_commands))
    obs = _observations(trials, context.n_commands)
    code = {n: i for i, n in enumerate(ACTION_NAMES)}
    cmd = trials["command"].to_numpy(dtype=np.int64)
    rec = trials.to_dict("records")
    n = len(rec)
    probs = np.empty((n, 3))
    info: dict[str, Any] = {"target": int(cmd[0]), "target_name": names[cmd[0]], "next_trial": 0}
    for t, r in enumerate(rec):
        probs[t] = agent.action_probabilities(obs[t], info)
        nxt = int(cmd[min(t + 1, n - 1)])
        a = code[r["action"]]
        after = {
            "target": nxt, "target_name": names[nxt], "next_trial": t + 1,
            "trial": int(r["trial"]), "session": int(r["session"]), "onset_s": float(r["onset_s"]),
            "command": int(cmd[t]), "command_name": names[cmd[t]], "action": a,
            "outcome": r["outcome"], "duration_s": float(r["duration_s"]),
        }
        next_obs = obs[min(t + 1, n - 1)]
        agent.observe(Transition(obs[t], a, -float(r["duration_s"]), next_obs, after, False, t + 1 == n))
        info = after
    return probs


def _likelihood_input(agent: Agent, trials: pd.DataFrame, context: AgentContext) -> Any:
    """What ``agent.likelihood_function`` takes: the frame itself for agents that declare
    ``likelihood_input = "frame"``, else ``TrialArrays.from_frame`` (CONTRACTS.md)."""
    if getattr(agent, "likelihood_input", "trial_arrays") == "frame":
        return trials
    return TrialArrays.from_frame(trials, context.n_commands)


def loglik_function(spec: ModelSpec, trials: pd.DataFrame, context: AgentContext) -> tuple[LogLik, bool]:
    """(f(theta natural, full vector) -> ln L, whether the fast path is used)."""
    agent = spec.build(context)
    if hasattr(agent, "likelihood_function"):
        return agent.likelihood_function(_likelihood_input(agent, trials, context)), True
    names = list(agent.param_specs())
    actions = trials["action"].map({n: i for i, n in enumerate(ACTION_NAMES)}).to_numpy(dtype=np.int64)

    def slow(theta: np.ndarray) -> float:
        fresh = spec.build(context, **dict(zip(names, map(float, theta), strict=True)))
        p = replay_probabilities(fresh, trials, context)
        chosen = p[np.arange(len(actions)), actions]
        with np.errstate(divide="ignore"):
            return float(np.log(chosen).sum())

    return slow, False


# ---- priors (MAP) ------------------------------------------------------------------------------
_PRIOR_FAMILIES = {
    "normal": (stats.norm, 2), "beta": (stats.beta, 2), "gamma": (stats.gamma, 2), "lognormal": (None, 2),
}


def parse_prior(text: str) -> tuple[str, Any]:
    """'name=family:a:b' -> (parameter, frozen scipy distribution on the natural scale).

    Families: normal:mean:sd, beta:a:b, gamma:shape:scale, lognormal:mu:sigma (of ln x).
    """
    name, eq, rest = text.partition("=")
    parts = rest.split(":")
    if not eq or not name or len(parts) != 3 or parts[0] not in _PRIOR_FAMILIES:
        raise ValueError(f"prior {text!r} must look like name=family:a:b with family in {sorted(_PRIOR_FAMILIES)}")
    try:
        a, b = float(parts[1]), float(parts[2])
    except ValueError:
        raise ValueError(f"prior {text!r}: {parts[1]!r} and {parts[2]!r} must be numbers") from None
    family = parts[0]
    if b <= 0 or (family in ("beta", "gamma") and a <= 0):
        raise ValueError(f"prior {text!r}: scale/shape values must be > 0")
    if family == "normal":
        return name, stats.norm(a, b)
    if family == "beta":
        return name, stats.beta(a, b)
    if family == "gamma":
        return name, stats.gamma(a, scale=b)
    return name, stats.lognorm(b, scale=math.exp(a))


# ---- BLAS threads ------------------------------------------------------------------------------
#: (get, set) thread-count entry points of the OpenBLAS builds numpy/scipy wheels ship (scipy's and
#: numpy's prefixed builds, then a plain one).
_OPENBLAS_ENTRY_POINTS = (("scipy_openblas_get_num_threads", "scipy_openblas_set_num_threads"),
                          ("scipy_openblas_get_num_threads64_", "scipy_openblas_set_num_threads64_"),
                          ("openblas_get_num_threads", "openblas_set_num_threads"),
                          ("openblas_get_num_threads64_", "openblas_set_num_threads64_"))


@functools.cache
def _openblas_controls() -> tuple[tuple[Any, Any], ...]:
    """(get, set) thread-count functions of every OpenBLAS loaded in this process.

    Found through /proc/self/maps (Linux); elsewhere, or when nothing matches, none.
    """
    try:
        with open("/proc/self/maps") as fh:
            paths = sorted({line.split()[-1] for line in fh if "openblas" in line.lower() and ".so" in line})
    except OSError:
        return ()
    controls = []
    for path in paths:
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        for get_name, set_name in _OPENBLAS_ENTRY_POINTS:
            get, set_ = getattr(lib, get_name, None), getattr(lib, set_name, None)
            if get is not None and set_ is not None:
                controls.append((get, set_))
                break
    return tuple(controls)


@contextlib.contextmanager
def _single_threaded_blas() -> Iterator[None]:
    """Run the block with every loaded OpenBLAS on one thread, then restore the thread counts.

    L-BFGS-B calls BLAS on vectors of a handful of entries; waking OpenBLAS's worker threads for
    them made each optimiser step cost ~1 ms (5x the whole fit) on 2 busy cores.
    """
    controls = _openblas_controls()
    before = [int(get()) for get, _ in controls]
    for _, set_ in controls:
        set_(1)
    try:
        yield
    finally:
        for (_, set_), n in zip(controls, before, strict=True):
            set_(n)


# ---- one participant ---------------------------------------------------------------------------
@dataclass
class FitResult:
    """Best fit of one model to one participant."""

    participant: str
    model: str
    params: dict[str, float]
    loglik: float
    n_params: int
    n_trials: int
    converged: bool
    message: str
    n_starts: int
    starts_at_best: int
    log_posterior: float | None = None
    fast_path: bool = True

    @property
    def aic(self) -> float:
        """2k - 2 ln L."""
        return aic(self.loglik, self.n_params)

    @property
    def bic(self) -> float:
        """k ln n - 2 ln L."""
        return bic(self.loglik, self.n_params, self.n_trials)

    def row(self) -> dict[str, Any]:
        """One tidy row: identifiers, fit figures, ``param_<name>`` columns."""
        out: dict[str, Any] = {
            "participant": self.participant, "model": self.model, "loglik": self.loglik,
            "n_params": self.n_params, "n_trials": self.n_trials, "aic": self.aic, "bic": self.bic,
            "converged": self.converged, "message": self.message, "n_starts": self.n_starts,
            "starts_at_best": self.starts_at_best, "log_posterior": self.log_posterior,
            "fast_path": self.fast_path,
        }
        out.update({f"param_{k}": v for k, v in self.params.items()})
        return out


def _free_box(s: ParamSpec) -> tuple[float, float]:
    if s.transform in ("logit", "log"):
        return -FREE_LIMIT, FREE_LIMIT
    lo = s.lower if math.isfinite(s.lower) else -UNBOUNDED_LIMIT
    hi = s.upper if math.isfinite(s.upper) else UNBOUNDED_LIMIT
    return lo, hi


def draw_start(s: ParamSpec, rng: np.random.Generator) -> float:
    """A random starting value (natural units) for one parameter.

    Two-sided bounds: uniform over the middle 90% of the range in the transformed coordinate
    (logit-uniform in [-2.2, 2.2]); lower bound only: lower + default * exp(N(0, 1));
    unbounded: default + N(0, 1). Common practice, no source.
    """
    if s.transform == "logit":
        return s.from_free(rng.uniform(-2.2, 2.2))
    if s.transform == "log":
        scale = max(s.default - s.lower, 1e-3)
        return s.lower + scale * math.exp(rng.normal())
    lo, hi = _free_box(s)
    return float(np.clip(s.default + rng.normal(), lo, hi))


def fit_participant(
    spec: ModelSpec,
    trials: pd.DataFrame,
    context: AgentContext,
    n_starts: int = 10,
    seed: int | np.random.SeedSequence = 0,
    priors: Mapping[str, Any] | None = None,
    participant: str = "",
) -> FitResult:
    """Fit ``spec`` to one participant's trials (``participant_trials`` frame) by ML or MAP.

    Start 1 is the parameters' defaults, the others are random (:func:`draw_start`). With
    ``priors`` (name -> frozen scipy distribution) the MAP estimate is returned; ln L, AIC and BIC
    are then evaluated at the MAP point.
    """
    if n_starts < 1:
        raise ValueError(f"n_starts must be >= 1, got {n_starts}")
    f, fast = loglik_function(spec, trials, context)
    specs = spec.build(context).param_specs()
    free = [n for n in specs if n not in spec.fixed]
    priors = dict(priors or {})
    unknown = set(priors) - set(free)
    if unknown:
        raise ValueError(f"model {spec.label!r}: prior for unknown or fixed parameter(s) {sorted(unknown)}")
    base = np.array([spec.fixed.get(n, specs[n].default) for n in specs], dtype=float)
    where = [list(specs).index(n) for n in free]
    n_trials = len(trials)

    def natural(x: np.ndarray) -> np.ndarray:
        theta = base.copy()
        for j, (n, v) in enumerate(zip(free, x, strict=True)):
            theta[where[j]] = specs[n].from_free(float(v))
        return theta

    def log_prior(theta: np.ndarray) -> float:
        return float(sum(priors[n].logpdf(theta[where[free.index(n)]]) for n in priors))

    def objective(x: np.ndarray) -> float:
        theta = natural(x)
        value = f(theta) + (log_prior(theta) if priors else 0.0)
        return -value if np.isfinite(value) else 1e12

    if not free:
        ll = float(f(base))
        return FitResult(participant, spec.label, dict(zip(specs, base.tolist(), strict=True)), ll, 0, n_trials,
                         True, "no free parameters", 0, 0, ll + log_prior(base) if priors else None, fast)
    rng = np.random.default_rng(seed)
    boxes = [_free_box(specs[n]) for n in free]
    results = []
    with _single_threaded_blas():
        for i in range(n_starts):
            start = [specs[n].default if i == 0 else draw_start(specs[n], rng) for n in free]
            x0 = np.array([np.clip(specs[n].to_free(v), *box) for n, v, box in zip(free, start, boxes, strict=True)])
            res = optimize.minimize(objective, x0, method="L-BFGS-B", bounds=boxes)
            results.append(res)
    values = np.array([r.fun for r in results])
    best = results[int(np.argmin(values))]
    theta = natural(best.x)
    ll = float(f(theta))
    return FitResult(
        participant=participant, model=spec.label, params=dict(zip(specs, theta.tolist(), strict=True)),
        loglik=ll, n_params=len(free), n_trials=n_trials, converged=bool(best.success),
        message=str(best.message), n_starts=n_starts,
        starts_at_best=int(np.sum(values <= best.fun + 1e-3)),
        log_posterior=(ll + log_prior(theta)) if priors else None, fast_path=fast,
    )


# ---- many participants x models ----------------------------------------------------------------
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
        raise ValueError(f"model labels must be unique, got {labels}")
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
