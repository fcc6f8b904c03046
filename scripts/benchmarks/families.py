"""Trials per second per agent family, against references measured in the same run.

For each family (fixed baselines, random, static softmax, tabular, learning model, planner, and
with ``sb3`` a small PPO model): simulated trials per second of ``simulate_users`` (block sums,
the compiled batch policy where the agent has one) at 1,024 and 100,000 users, on one thread and
on one thread per core, against

* the looped ``gymnasium.make`` env + the same agent stepped one trial at a time (act, step,
  observe; a few users), and
* gymnasium's native CartPole vector env (``gymnasium.make_vec(..., "vector_entry_point")``) at
  1,024 envs, random actions, in steps per second.

Targets (issue 14): every compiled agent >= 100x the looped env at 1,000 users and >= 0.5x the
CartPole vector env; the fixed baselines above 1x. The planner's plan is made before the clock
starts (planning time is printed apart). Families without a compiled decision are timed at 1,024
users only (100,000 would take minutes) and say so.

Part C: planned choice (softmax over the planner's action values) batched against its per-user
path (one agent object per user, ``use_batch_policy=False``), sums only and with every trial kept,
as interleaved pairs in the same run; the ratio of trials per second is the median of the pairs'
ratios, with their min and max. Its plan is made before the clock starts.

Then the held-out style sweep: 48 LHS points x 3 agents (always-menu, learn-first-1, the
planner) x 6 users x 120 trials on local processes, planning printed apart from the runs'
simulation. The pass line (target: under 3 s after planning) is the simulation's CPU seconds in
the workers (summed over runs; not inflated when other processes share the cores), with the wall
seconds beside it; planning (making or reading plans, and waiting for another worker's plan) is
printed on its own line.
"""

from __future__ import annotations

import json
import os
import tempfile
import time
from pathlib import Path
from typing import Any

import gymnasium as gym
import numpy as np

import shortcut_gym.envs  # noqa: F401 - registers the env
from benchmarks import timing
from benchmarks.timing import Out, load_average
from shortcut_gym.agents.base import PreparedAgent
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.envs import ENV_ID, make_world
from shortcut_gym.lab.sweep.batch import build_agent, simulate_users
from shortcut_gym.lab.sweep.runner import run_sweep

#: (family, agent spec, has a compiled decision)
FAMILIES: list[tuple[str, dict[str, Any], bool]] = [
    ("fixed: always_menu", {"name": "always_menu"}, True),
    ("fixed: learn_first_k(k=1)", {"name": "learn_first_k", "params": {"k": 1}}, True),
    ("random", {"name": "random"}, True),
    ("static_softmax", {"name": "static_softmax", "params": {"b_hotkey": -1.0, "w_hotkey_log_exposure": 0.8}}, True),
    ("tabular: q_learning (frozen)", {"name": "q_learning"}, True),
    ("learning: rescorla_wagner", {"name": "rescorla_wagner"}, True),
    ("planner: bounded_optimal", {"name": "bounded_optimal"}, True),
    ("planner: planned_choice", {"name": "planned_choice", "with_lapse": True, "params": {"beta": 2.0, "lapse": 0.05}},
     True),
]
#: the planned-choice agent of part C (a mid inverse temperature, a small lapse)
PLANNED_CHOICE = FAMILIES[-1][1]
USERS = (1_024, 100_000)


def cartpole_vector_steps_per_s(n_envs: int = 1_024, steps: int = 500) -> float:
    """Steps per second (summed over envs) of gymnasium's native CartPole vector env."""
    env = gym.make_vec("CartPole-v1", num_envs=n_envs, vectorization_mode="vector_entry_point")
    env.reset(seed=0)
    acts = np.random.default_rng(0).integers(0, 2, size=(steps, n_envs))
    for a in acts[:20]:
        env.step(a)
    t0 = time.perf_counter()
    for a in acts:
        env.step(a)
    return steps * n_envs / (time.perf_counter() - t0)


def looped_trials_per_s(spec: dict[str, Any], schedule: dict, users: int = 4, agent: Any = None) -> float:
    """Trials per second of gymnasium.make env + agent: act, step, observe (no trial table kept)."""
    env = gym.make(ENV_ID, schedule=schedule)
    return timing.looped_trials_per_s(env, agent if agent is not None else agent_from_spec(spec), users)


def batched_trials_per_s(world: Any, spec: Any, users: int, threads: int, repeats: int = 3) -> float:
    """Trials per second of ``simulate_users`` (best of ``repeats`` below 10,000 users, else one run)."""
    simulate_users(world, spec, [0, 1], threads=threads)  # warm-up: compiles, plans
    best = 0.0
    for _ in range(repeats if users < 10_000 else 1):
        t0 = time.perf_counter()
        sums = simulate_users(world, spec, range(users), threads=threads)
        best = max(best, int(sums.trials.sum()) / (time.perf_counter() - t0))
    return best


def _trained_ppo(world: Any, steps: int) -> Any:
    agent = agent_from_spec({"name": "ppo", "hyperparameters": {"n_steps": 128, "batch_size": 64}})
    agent.train(world, total_timesteps=steps, seed=0, progress_bar=False, n_envs=8)
    return agent


def part_families(sessions: int, quick: bool, sb3: bool, out: Out = print, only: tuple[str, ...] = ()) -> None:
    """Per-family trials per second (``quick``: 1,024 users only, one thread; ``only``: the
    families whose name contains one of these strings)."""
    schedule = {"sessions": sessions, "trials_per_session": 40}
    world = make_world(schedule=schedule)
    cores = os.cpu_count() or 1
    cart = cartpole_vector_steps_per_s()
    out(f"\nA. Agent families on {sessions * 40} trials per user; load average {load_average()}")
    out(f"   CartPole-v1 native vector env, 1,024 envs: {cart:>12,.0f} steps/s (reference)")
    families = selected_families(only)
    extra: dict[str, Any] = {}
    if sb3:
        t0 = time.perf_counter()
        extra["sb3: ppo"] = _trained_ppo(world, 1_024 if quick else 4_096)
        out(f"   (trained a small PPO model in {time.perf_counter() - t0:.1f} s)")
        # the model goes through a file, as a sweep spec gives it (model_path)
        model = extra["sb3: ppo"].save(Path(tempfile.mkdtemp()) / "ppo_model")
        families.append(("sb3: ppo", {"name": "ppo", "model_path": str(model)}, True))
    for family, spec, compiled in families:
        agent = extra.get(family)
        spec_or_agent: Any = spec if spec else agent
        if agent is None:
            prepared = build_agent(spec, world)
            if isinstance(prepared, PreparedAgent):
                out(f"   {family}: planning the world took {prepared.prepare():.2f} s (not in the figures below)")
        looped = looped_trials_per_s(spec, schedule, users=2 if "planner" in family or agent else 4, agent=agent)
        out(f"   {family}")
        out(f"      looped gymnasium.make env + agent: {looped:>12,.0f} trials/s")
        for users in USERS[:1] if quick or not compiled else USERS:
            for threads in (1,) if quick else (1, cores):
                if agent is not None and threads > 1:
                    continue
                rate = batched_trials_per_s(world, spec_or_agent, users, threads, 3 if compiled else 1)
                verdict = "meets" if rate >= 100 * looped and rate >= 0.5 * cart else "below"
                out(f"      batched, {users:>7,} users, {threads} thread{'s' if threads > 1 else ' '}: {rate:>12,.0f} "
                    f"trials/s  {rate / looped:>8,.1f}x looped  {rate / cart:5.2f}x CartPole vec  "
                    f"(targets 100x, 0.5x: {verdict})")
        if not compiled:
            out("      (no compiled decision: 100,000 users not timed)")
    out(f"   load average at end {load_average()}")


def heldout_spec(points: int = 48, users: int = 6) -> dict[str, Any]:
    """The held-out style sweep: LHS points x (always-menu, learn-first-1, planner), 120 trials per user."""
    return {
        "name": "bench_heldout",
        "base": {"schedule": {"sessions": 3, "trials_per_session": 40, "gap_h": 20.0}},
        "vary": {"design": "lhs", "points": points, "seed": 1, "parameters": {
            "costs.klm.keystroke_s": {"low": 0.1, "high": 0.6},
            "costs.learn.encoding_s": {"low": 1.0, "high": 20.0, "scale": "log"},
            "memory.threshold": {"low": -4.0, "high": -2.0},
        }},
        "agents": [{"name": "always_menu"}, {"name": "learn_first_k", "params": {"k": 1}}, {"name": "bounded_optimal"}],
        "seeds": {"first": 0, "count": users},
        "outputs": {"plots": False},
    }


def part_heldout(quick: bool, out: Out = print) -> None:
    """The held-out style sweep on 2 local processes: wall time, simulation and planning compute."""
    points = 8 if quick else 48
    spec = heldout_spec(points)
    runs = points * 3
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        report = run_sweep(spec, Path(tmp) / "s", workers=2, progress=False, write_outputs=False)
        wall = time.perf_counter() - t0
        metas = [json.loads(p.read_text()) for p in (Path(tmp) / "s" / "runs").glob("*/meta.json")]
    plan_s = sum(m["plan_s"] for m in metas)
    wait_s = sum(m.get("plan_wait_s") or 0.0 for m in metas)
    compute_s = sum(m["compute_s"] for m in metas)
    plan_cpu = sum(m["plan_cpu_s"] for m in metas)
    compute_cpu = sum(m["compute_cpu_s"] for m in metas)
    sim_cpu, sim_wall = compute_cpu - plan_cpu, compute_s - plan_s - wait_s
    verdict = "meets" if sim_cpu < 3.0 else "above"
    out(f"\nB. Held-out style sweep: {points} points x 3 agents x 6 users x 120 trials ({runs} runs), 2 processes; "
        f"{len(report.failed)} failed")
    out(f"   simulation: CPU {sim_cpu:.2f} s (target < 3 s after planning: {verdict}); "
        f"wall in the workers {sim_wall:.2f} s, ratio wall/CPU {sim_wall / sim_cpu if sim_cpu else float('nan'):.2f}")
    out(f"   planning: wall {plan_s:.2f} s, CPU {plan_cpu:.2f} s; waiting for the other worker's plan {wait_s:.2f} s; "
        f"{report.plans_made} plans made, {report.plans_loaded} read from the plan store")
    out(f"   sweep wall {wall:.2f} s in all (in-worker compute {compute_s:.2f} s, CPU {compute_cpu:.2f} s; start-up "
        f"before forking {report.warm_up_s:.2f} s); load average {load_average()}")


def part_planned_choice(sessions: int, quick: bool, out: Out = print) -> None:
    """Part C: planned choice batched (its compiled batch policy) against its per-user path, paired."""
    world = make_world(schedule={"sessions": sessions, "trials_per_session": 40})
    spec = PLANNED_CHOICE
    plan_s = build_agent(spec, world).prepare()  # type: ignore[attr-defined]
    batched_users, per_user_users = (256, 4) if quick else (1_024, 8)
    pairs = 3 if quick else 5
    out(f"\nC. planned_choice batched vs per-user, {sessions * 40} trials per user (planning {plan_s:.2f} s, not "
        f"timed); load average {load_average()}")
    for record in ("blocks", "trials"):
        rates: dict[bool, list[float]] = {True: [], False: []}
        for batched in (True, False):  # warm-up: compiles
            simulate_users(world, spec, [0, 1], record=record, use_batch_policy=batched)
        for _ in range(pairs):
            for batched in (True, False):
                users = batched_users if batched else per_user_users
                t0 = time.perf_counter()
                sums = simulate_users(world, spec, range(users), record=record, use_batch_policy=batched)
                rates[batched].append(int(sums.trials.sum()) / (time.perf_counter() - t0))
        ratios = [b / p for b, p in zip(rates[True], rates[False], strict=True)]
        kept = "sums only" if record == "blocks" else "every trial kept"
        out(f"   {kept:<17} batched {batched_users:>5,} users {np.median(rates[True]):>11,.0f} trials/s   per-user "
            f"{per_user_users} users {np.median(rates[False]):>9,.0f} trials/s   ratio {np.median(ratios):>7,.1f}x "
            f"(min {min(ratios):,.1f}x, max {max(ratios):,.1f}x, {pairs} pairs)")
    out(f"   load average at end {load_average()}")


def selected_families(only: tuple[str, ...] = ()) -> list[tuple[str, dict[str, Any], bool]]:
    """The families of :data:`FAMILIES` whose name contains one of the strings of ``only`` (all of them
    when ``only`` is empty)."""
    return [f for f in FAMILIES if not only or any(o in f[0] for o in only)]


def run(quick: bool = False, out: Out = print, sessions: int = 10, sb3: bool = True,
        only: tuple[str, ...] = ()) -> None:
    """The three parts (``quick``: 1,024 users, one thread, an 8-point sweep). ``only`` selects the
    families whose name contains one of these strings (:func:`selected_families`): part A times
    them, part C runs when the planned_choice family is among them, and part B runs when one of
    the strings is "sweep"; an empty ``only`` runs everything."""
    chosen = selected_families(only)
    if chosen:
        part_families(sessions, quick, sb3, out, only)
    if not only or "sweep" in only:
        part_heldout(quick, out)
    if any(spec is PLANNED_CHOICE for _, spec, _ in chosen):
        part_planned_choice(sessions, quick, out)
