"""Was each participant bounded-optimal? Their choices against the yardstick planner in their own world.

Per participant: the operator times fitted to their own trial durations (:mod:`..fitting.durations`)
give the world they imply; the yardstick planner (:class:`~shortcut_gym.agents.planner.BoundedOptimalPlanner`)
plans for that world. Two figures of the time lost against their own optimum:

* the headline, ``simulated_time_lost_s``: the logged total time minus the planner's mean total
  time over ``n_sims`` simulated users replaying the participant's own schedule (their targets in
  order, onsets, sessions and gaps) in their world, with its Monte Carlo standard error
  ``simulated_time_lost_se``. Every participant's simulated users share one set of seeds (common
  random numbers across participants). Its expectation over the participant's luck is exactly
  E[own policy] - E[optimum] on their schedule, on every memory model (it needs no value function);
  a single history carries its luck with recall and trial-time noise, whose scale is
  ``optimum_time_sd_s`` (one simulated planner user's spread);
* the decomposition, ``q_time_lost_s``: per logged trial Q(a*) - Q(a), the planner's expected
  seconds (this use and the later ones of the command) given up by the logged action a, the
  planner tracking the participant's memory from their logged outcomes; a* is what the planner
  executes in their state (its ``decide``). Summed over trials it is the performance-difference
  estimate of the loss (Kakade & Langford 2002, "Approximately optimal approximate reinforcement
  learning", ICML, lemma 6.1): E[sum of advantages along one's own trajectory] = V(own policy) -
  V(optimal); it is zero for the planner's own choices and says on which trials and commands the
  time went. It is in the executed policy's values with the homing priced at the midpoint of the
  participant's and the optimum's hand shares (agents.planner.valuation). It is approximate:
  against Monte Carlo it is within 3 standard errors plus 6% of the simulated loss on 15 of 20
  (memory, world, policy) cells; with ACT-R memory it overstates an always-menu user's loss (+17%
  on the default world, +70% with dear learning and 7-day gaps), and with exponential memory, dear
  learning and 1 h gaps it understates it (-21%; tests/test_rationality_time_lost_family.py,
  docs/rationality.md).

Per command: whether learning it pays *for them* (the planner's analytic break-even in their world,
:func:`~shortcut_gym.agents.planner.break_even_table`, and whether the planner ever chooses learn or
hotkey for it on their history) and whether they learned it (a learn trial, and most hotkey attempts
of its last half of uses recalled). The rationality index is the fitted inverse temperature of the
``planned_choice`` model in their world with its profile-likelihood interval (ln L within
chi2(1, 0.95) / 2 = 1.92 of the maximum, Wilks 1938); the planned-choice model is compared by BIC
with the learning models fitted to the same choices.
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize

from shortcut_gym.agents.base import AgentContext, Transition
from shortcut_gym.agents.planned_choice import BETA_MAX, cached_plan
from shortcut_gym.agents.planner import break_even_table, check_memory_kind
from shortcut_gym.agents.planner.valuation import executed_shares, executed_values
from shortcut_gym.agents.rollout import context_of_world, drive_batch
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.kernel import ACTION_NAMES
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.task import Schedule
from shortcut_gym.envs.world import World
from shortcut_gym.lab.compare import bms_of_fits
from shortcut_gym.lab.data.logs import participant_trials, participants, schedule_of
from shortcut_gym.lab.fitting import ModelSpec, fit_durations, fit_participant, joint_table, loglik_function

#: chi2(1) 95% quantile / 2: the drop in ln L bounding a 95% profile-likelihood interval (Wilks 1938).
PROFILE_DROP = 3.841458820694124 / 2.0
PLANNED = "planned_choice"
#: Group-table figures the report reads back: participants better explained by PLANNED (a count)
#: and PLANNED's BMS protected exceedance probability.
BETTER_COUNT_FIGURE = f"participants better explained by {PLANNED} (BIC)"
PXP_FIGURE = f"BMS protected exceedance probability of {PLANNED}"
#: Simulated planner users per participant for ``simulated_time_lost_s`` (its Monte Carlo SE is
#: the planner's spread / 16: about 0.4 s on a 160-trial default world, against a spread of 6-7 s).
DEFAULT_SIMS = 256


@dataclass(frozen=True)
class PlannerOptions:
    """Options of the yardstick planner used for every participant (see ``BoundedOptimalPlanner``)."""

    n_bins: int = 20
    n_weight_bins: int = 5
    keyboard_share: float | None = None
    select_users: int = 0

    def spec(self, world: World) -> ModelSpec:
        """The planned-choice model in ``world`` with these planner options."""
        return ModelSpec(PLANNED, options={"world": world, "n_bins": self.n_bins, "n_weight_bins": self.n_weight_bins,
                                           "keyboard_share": self.keyboard_share, "select_users": self.select_users})


@dataclass
class RationalityResult:
    """Tables of the rationality analysis (see the module docstring)."""

    participants: pd.DataFrame
    commands: pd.DataFrame
    trials: pd.DataFrame
    fits: pd.DataFrame
    durations: pd.DataFrame
    group: pd.DataFrame = field(default_factory=pd.DataFrame)


def own_world(base: World, estimates: dict[str, float], n_trials: int) -> World:
    """The world a participant's fitted operator times imply (the base world's schedule, which must
    cover their ``n_trials``)."""
    from shortcut_gym.lab.fitting import implied_world

    if n_trials > base.horizon:
        raise ConfigError(f"a participant has {n_trials} trials, the world's schedule only {base.horizon}; give "
                          "a world whose schedule covers the log")
    return implied_world(base, estimates)


def participant_shares(trials: pd.DataFrame) -> tuple[float, float]:
    """(share of trials that leave the hand on the keyboard, share that start with a hotkey attempt)."""
    on_keyboard = float((trials["outcome"].astype(str) == "hotkey").mean())
    return on_keyboard, float((trials["action"].astype(str) == "hotkey").mean())


def assess_choices(trials: pd.DataFrame, world: World, options: PlannerOptions) -> pd.DataFrame:
    """Per logged trial: the planner's action values (``q_*``, what it decides by), its optimal
    action and the decomposition's time lost ``q_time_lost_s`` (s): Q(a*) - Q(a) in the executed
    policy's values with the homing priced at the midpoint of the participant's and the optimum's hand shares
    (:func:`~shortcut_gym.agents.planner.valuation.executed_values`; each switch charged once).
    The pieces are columns too, so ``q_time_lost_s`` can be recomputed from the table: ``priced_menu``,
    ``priced_hotkey``, ``priced_learn`` (s, minus expected seconds) are those executed-policy values
    and ``priced_keyboard_share`` / ``priced_next_hotkey_share`` the midpoint shares they are priced
    at; ``q_time_lost_s`` = priced value of ``optimal_action`` - priced value of ``action``."""
    planner = cached_plan(world, options.keyboard_share, options.n_bins, options.n_weight_bins, options.select_users)
    assert planner.plan is not None
    d = trials.sort_values("trial", kind="stable")
    ks_opt, q_opt = executed_shares(world, planner.plan)
    ks_own, q_own = participant_shares(d)
    valuer = cached_plan(world, options.keyboard_share, options.n_bins, options.n_weight_bins, options.select_users)
    keyboard_mid, hotkey_mid = (ks_opt + ks_own) / 2, (q_opt + q_own) / 2
    valuer.plan = executed_values(world, planner.plan, keyboard_mid, hotkey_mid)
    valuer.reset(0)
    command = d["command"].to_numpy(dtype=np.int64)
    outcome = d["outcome"].astype(str).to_numpy()
    code = {n: i for i, n in enumerate(ACTION_NAMES)}
    action = np.array([code[str(a)] for a in d["action"]], dtype=np.int64)
    n = len(d)
    q = np.empty((n, 3))
    v = np.empty((n, 3))
    best = np.empty(n, dtype=np.int64)
    empty = np.zeros(0, dtype=np.float32)
    for t in range(n):
        c = int(command[t])
        q[t] = planner.action_values(c, t)
        v[t] = valuer.action_values(c, t)
        best[t] = planner.decide(c, t)
        tr = Transition(empty, int(action[t]), 0.0, empty, {"command": c, "trial": t, "outcome": outcome[t]})
        planner.observe(tr)
        valuer.observe(tr)
    rows = np.arange(n)
    return pd.DataFrame({
        "trial": d["trial"].to_numpy(), "command": command, "action": d["action"].astype(str).to_numpy(),
        "optimal_action": np.array(ACTION_NAMES, dtype=object)[best], "q_menu": q[:, 0], "q_hotkey": q[:, 1],
        "q_learn": q[:, 2], "q_time_lost_s": v[rows, best] - v[rows, action], "optimal": action == best,
        "priced_menu": v[:, 0], "priced_hotkey": v[:, 1], "priced_learn": v[:, 2],
        "priced_keyboard_share": np.full(n, keyboard_mid), "priced_next_hotkey_share": np.full(n, hotkey_mid),
    })


@dataclass(frozen=True)
class SimulatedLoss:
    """One participant's time against the planner simulated on their own schedule (seconds).

    ``lost_s`` = ``observed_s`` - ``optimum_s``; ``lost_se`` is its Monte Carlo standard error (the
    observed time is data, so it is the SE of the planner's mean); ``optimum_sd_s`` is the spread of
    one simulated planner user's total, the scale of the luck (recall draws, trial-time noise) in a
    single history."""

    observed_s: float
    optimum_s: float
    optimum_sd_s: float
    lost_se: float
    n_sims: int

    @property
    def lost_s(self) -> float:
        """Observed total time minus the planner's mean simulated total time (s)."""
        return self.observed_s - self.optimum_s


def simulation_seeds(seed: int, n_sims: int) -> list[int]:
    """The simulated users' seeds: the same for every participant of an analysis (common random
    numbers: two participants' figures differ by their histories, not by the planner's draws)."""
    return [int(x) for x in np.random.SeedSequence([seed, 0x71AE]).generate_state(n_sims)]


def simulated_time_lost(trials: pd.DataFrame, world: World, options: PlannerOptions, n_sims: int,
                        seed: int = 0) -> SimulatedLoss:
    """The participant's logged total time against the planner's over ``n_sims`` simulated users
    replaying their own schedule (targets in order, onsets, sessions, gaps: :func:`schedule_of`) in
    ``world``, on the batched simulator (:func:`~shortcut_gym.agents.rollout.drive_batch`).

    When the world's schedule is longer than the participant's log, the planner plans for the
    world's horizon and its time over the logged trials is counted: the schedule is continued by
    :func:`continued_schedule` in a session of its own and the logged sessions' times summed (a
    trial's time does not depend on the trials after it, so the continuation changes nothing
    counted; the compiled run's per-session sums serve, no trial is kept)."""
    if n_sims < 1:
        raise ConfigError(f"n_sims must be >= 1, got {n_sims}")
    if trials.empty:
        raise ConfigError("simulated_time_lost needs at least one trial of the participant")
    ordered = trials.sort_values("trial", kind="stable")
    schedule = schedule_of(ordered)
    seeds = simulation_seeds(seed, n_sims)
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds, schedules=[continued_schedule(schedule, world.horizon)] * n_sims)
    planner = cached_plan(world, options.keyboard_share, options.n_bins, options.n_weight_bins, options.select_users)
    logged_sessions = int(schedule.session.max()) + 1  # the continuation is session logged_sessions
    totals = drive_batch(sim, planner, seeds).sums.time_s[:, :logged_sessions].sum(axis=1)
    sd = float(totals.std(ddof=1)) if n_sims > 1 else float("nan")
    return SimulatedLoss(float(ordered["duration_s"].sum()), float(totals.mean()), sd, sd / np.sqrt(n_sims), n_sims)


def continued_schedule(schedule: Schedule, horizon: int, command: int | None = None) -> Schedule:
    """``schedule`` continued to ``horizon`` trials: the further trials target ``command`` (default:
    the last logged one), in a session of their own after the last logged one (no gap), one median
    onset interval apart (60 s when the log gives none). Raises :class:`ConfigError` when the
    schedule is already longer."""
    n = schedule.horizon
    if n > horizon:
        raise ConfigError(f"a participant has {n} trials, the world's schedule only {horizon}; give a world whose "
                          "schedule covers the log")
    extra = horizon - n
    if extra == 0:
        return schedule
    steps = np.diff(schedule.onset_s)[np.diff(schedule.session) == 0]
    step = float(np.median(steps)) if len(steps) else 60.0
    target = int(schedule.command[-1]) if command is None else int(command)
    return Schedule(
        command=np.concatenate([schedule.command, np.full(extra, target, dtype=np.int64)]),
        onset_s=np.concatenate([schedule.onset_s, schedule.onset_s[-1] + step * np.arange(1, extra + 1)]),
        session=np.concatenate([schedule.session, np.full(extra, schedule.session.max() + 1, dtype=np.int64)]),
        gap_total_s=np.concatenate([schedule.gap_total_s, np.full(extra, schedule.gap_total_s[-1])]),
    )


def command_table(trials: pd.DataFrame, assessed: pd.DataFrame, world: World, options: PlannerOptions) -> pd.DataFrame:
    """Per command of one participant: does learning pay for them (``learning_pays``: the planner in
    their world chooses learn or the hotkey for it at some trial of their history; the simple
    break-even rule's answer is ``break_even_pays``), did they learn it."""
    pays = break_even_table(world, options.keyboard_share, options.n_bins).set_index("command")
    rows = []
    for c, part in trials.groupby("command", sort=True):
        mine = assessed[assessed["command"] == c]
        half = part.iloc[len(part) // 2:]
        attempts = half[half["action"] == "hotkey"]
        recalled = float((attempts["outcome"] == "hotkey").mean()) if len(attempts) else 0.0
        learned = bool(((part["action"] == "learn").any() or (part["outcome"] == "hotkey").any())
                       and len(attempts) >= max(1, len(half) // 2) and recalled >= 0.5)
        planner_keys = bool((mine["optimal_action"] != "menu").any())
        rows.append({"command": int(c), "uses": len(part),
                     "learning_pays": planner_keys,
                     "break_even_pays": bool(pays.loc[c, "learning_pays"]),
                     "break_even_uses": float(pays.loc[c, "break_even_uses"]),
                     "planner_uses_hotkey": planner_keys,
                     "learned": learned, "hotkey_share_last_half": float((half["outcome"] == "hotkey").mean()),
                     "q_time_lost_s": float(mine["q_time_lost_s"].sum())})
    return pd.DataFrame(rows)


def profile_interval(f: Any, beta_hat: float, ll_hat: float) -> tuple[float, float]:
    """95% profile-likelihood interval of the inverse temperature (one parameter: the likelihood itself)."""
    def g(b: float) -> float:
        return f(np.array([b])) - (ll_hat - PROFILE_DROP)

    lo = 0.0 if g(0.0) >= 0 else optimize.brentq(g, 0.0, beta_hat) if beta_hat > 0 else 0.0
    hi = BETA_MAX if g(BETA_MAX) >= 0 else optimize.brentq(g, beta_hat, BETA_MAX)
    return float(lo), float(hi)


def _participant(job: tuple) -> dict[str, Any]:
    pid, trials, base, options, learning, n_starts, seed, noise, n_sims = job
    dfit = fit_durations(trials, base, noise, pid)
    world = own_world(base, dfit.estimates, len(trials))
    assessed = assess_choices(trials, world, options).assign(participant=pid)
    commands = command_table(trials, assessed, world, options).assign(participant=pid)
    ctx = AgentContext(base.commands.n_commands, len(trials), base.commands.names, tuple(base.observation_names()))
    spec = options.spec(world)
    fits = [fit_participant(spec, trials, ctx, n_starts, np.random.SeedSequence([seed, 0]), participant=pid)]
    for j, s in enumerate(learning):
        fits.append(fit_participant(s, trials, ctx, n_starts, np.random.SeedSequence([seed, j + 1]), participant=pid))
    planned = fits[0]
    simulated = simulated_time_lost(trials, world, options, n_sims, seed)
    f, _ = loglik_function(spec, trials, ctx)
    lo, hi = profile_interval(f, planned.params["beta"], planned.loglik)
    best_learning = min(fits[1:], key=lambda r: r.bic) if learning else None
    row: dict[str, Any] = {
        "participant": pid, "n_trials": len(trials),
        "simulated_time_lost_s": simulated.lost_s, "simulated_time_lost_se": simulated.lost_se,
        "q_time_lost_s": float(assessed["q_time_lost_s"].sum()),
        "observed_time_s": simulated.observed_s, "optimum_time_s": simulated.optimum_s,
        "optimum_time_sd_s": simulated.optimum_sd_s, "n_sims": simulated.n_sims,
        "optimal_share": float(assessed["optimal"].mean()),
        "beta": planned.params["beta"], "beta_low": lo, "beta_high": hi,
        "planned_bic": planned.bic,
        "commands_pay": int(commands["learning_pays"].sum()), "commands_learned": int(commands["learned"].sum()),
        "learned_where_pays": int((commands["learning_pays"] & commands["learned"]).sum()),
        "duration_cv": dfit.cv, **{f"own_{k}": v for k, v in dfit.estimates.items()},
        "held_operators": ";".join(name for name, ok in dfit.identified.items() if not ok),
        "operators_at_floor": ";".join(dfit.at_floor),
    }
    if best_learning is not None:
        row.update(best_learning_model=best_learning.model, learning_bic=best_learning.bic,
                   delta_bic=best_learning.bic - planned.bic,
                   better_model=PLANNED if planned.bic < best_learning.bic else best_learning.model)
    return {"row": row, "commands": commands, "trials": assessed, "fits": [r.row() for r in fits],
            "duration": dfit.row()}


def rationality_analysis(log: pd.DataFrame, base: World, learning: Sequence[ModelSpec] = (),
                         options: PlannerOptions | None = None, n_starts: int = 5, seed: int = 0, n_jobs: int = 1,
                         noise: str = "lognormal", n_sims: int = DEFAULT_SIMS,
                         progress: bool = False) -> RationalityResult:
    """The rationality analysis of every participant of a validated log (see the module docstring).

    ``learning``: the learning models the planned-choice model competes with (labels must differ
    from ``planned_choice``). ``n_jobs`` > 1 runs participants on that many processes. ``n_sims``:
    simulated planner users per participant for the headline ``simulated_time_lost_s``; ``seed``
    seeds the fits' starts and those users. ``progress`` draws a bar over the participants (stderr).
    """
    from tqdm.auto import tqdm

    check_memory_kind(base, "rationality_analysis")
    options = options or PlannerOptions()
    labels = [s.label for s in learning]
    if PLANNED in labels or len(set(labels)) != len(labels):
        raise ConfigError(f"learning model labels must be unique and not {PLANNED!r}, got {labels}")
    if n_sims < 1:
        raise ConfigError(f"n_sims must be >= 1, got {n_sims}")
    for s in learning:  # a trained model (model_path=) must be one of the base world: built bound to it, it
        s.build(context_of_world(base))  # checks its world record (each participant's own world differs by design)
    jobs = [(pid, participant_trials(log, pid), base, options, list(learning), n_starts, seed, noise, n_sims)
            for pid in participants(log)]
    bar = tqdm(total=len(jobs), desc="yardstick", disable=not progress, leave=False)
    parts = []
    if n_jobs <= 1:
        for j in jobs:
            parts.append(_participant(j))
            bar.update(1)
    else:
        with ProcessPoolExecutor(max_workers=n_jobs, mp_context=multiprocessing.get_context("spawn")) as pool:
            for part in pool.map(_participant, jobs):
                parts.append(part)
                bar.update(1)
    bar.close()
    per = pd.DataFrame([p["row"] for p in parts])
    fits = pd.DataFrame([r for p in parts for r in p["fits"]])
    durations = pd.DataFrame([p["duration"] for p in parts])
    result = RationalityResult(per, pd.concat([p["commands"] for p in parts], ignore_index=True),
                               pd.concat([p["trials"] for p in parts], ignore_index=True),
                               joint_table(fits, durations), durations)
    result.group = group_summary(result)
    return result


def group_summary(result: RationalityResult) -> pd.DataFrame:
    """One row per figure of the group (means with their SE over participants, counts, BMS)."""
    per = result.participants
    n = len(per)
    rows = []
    for name in ("simulated_time_lost_s", "q_time_lost_s", "optimal_share", "beta"):
        v = per[name].to_numpy(dtype=float)
        rows.append({"figure": f"mean {name}", "value": float(v.mean()),
                     "se": float(v.std(ddof=1) / np.sqrt(n)) if n > 1 else float("nan")})
    rows.append({"figure": "median beta", "value": float(per["beta"].median()), "se": float("nan")})
    cmd = result.commands
    rows.append({"figure": "share of commands where learning pays that were learned",
                 "value": float(cmd.loc[cmd["learning_pays"], "learned"].mean()) if cmd["learning_pays"].any()
                 else float("nan"), "se": float("nan")})
    rows.append({"figure": "share of commands where learning does not pay that were learned",
                 "value": float(cmd.loc[~cmd["learning_pays"], "learned"].mean()) if (~cmd["learning_pays"]).any()
                 else float("nan"), "se": float("nan")})
    if "better_model" in per:
        rows.append({"figure": BETTER_COUNT_FIGURE,
                     "value": float((per["better_model"] == PLANNED).sum()), "se": float("nan")})
        if result.fits["model"].nunique() > 1 and n > 1:
            bms = bms_of_fits(result.fits).table().set_index("model")
            rows.append({"figure": PXP_FIGURE,
                         "value": float(bms.loc[PLANNED, "protected_exceedance"]), "se": float("nan")})
    return pd.DataFrame(rows)
