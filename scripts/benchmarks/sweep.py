"""Sweeps at scale, measured against references timed in the same run.

1. Simulated trials per second of a learning model (a composed learner with look-ahead) on the batched simulator
   at 1, 1,000 and 100,000 simulated users, against looping ``gymnasium.make`` env + the same agent
   per step. Batched figures: the fused compiled loop (``simulate_users``' default for block sums)
   on one thread and on one thread per core (chunks of users at once, ``threads=``), and the
   per-trial batch loop (one kernel call per trial, ``fused=False``) for comparison. Target: at
   least 100x. CartPole-v1 through ``gymnasium.make`` is printed as the machine anchor.
2. Throughput of a 200-run sweep on local processes (2 workers) against Ray on 2 CPUs started on
   this machine. Target: Ray overhead at most 25%. Ray's start-up is timed separately.

``quick`` stops part 1 at 1,000 users and runs part 2 as a 20-run sweep of 8 users per run, once,
on local processes only (no Ray).
"""

from __future__ import annotations

import json
import os
import tempfile
import time
from pathlib import Path

import gymnasium as gym
import numpy as np

import shortcut_gym.envs  # noqa: F401 - registers the env
from benchmarks import families as agent_families
from benchmarks import timing
from benchmarks.timing import Out, load_average
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.agents.rollout import run_episode
from shortcut_gym.envs import ENV_ID, make_world
from shortcut_gym.lab.sweep.backends import RayBackend
from shortcut_gym.lab.sweep.batch import simulate_users
from shortcut_gym.lab.sweep.plan import plan_runs
from shortcut_gym.lab.sweep.runner import run_sweep
from shortcut_gym.lab.sweep.spec import parse_spec

LEARNER = {"name": "composed_learner", "mechanisms": ["value", "memory_aware", "planning", "incidental",
                                                    "forgetting", "perseveration", "lapse"]}


def cartpole_us_per_step(steps: int = 20_000) -> float:
    """Microseconds per CartPole-v1 step through gymnasium.make (random actions)."""
    env = gym.make("CartPole-v1")
    env.reset(seed=0)
    acts = np.random.default_rng(0).integers(0, 2, size=steps).tolist()
    t0 = time.perf_counter()
    for a in acts:
        _, _, term, trunc, _ = env.step(a)
        if term or trunc:
            env.reset()
    return (time.perf_counter() - t0) / steps * 1e6


def looped_trials_per_s(schedule: dict, users: int) -> float:
    """Trials per second of gymnasium.make env + agent stepped one trial at a time."""
    env = gym.make(ENV_ID, schedule=schedule)
    agent = agent_from_spec(LEARNER)
    run_episode(env, agent, seed=999)  # warm-up (compiles)
    t0 = time.perf_counter()
    n = 0
    for seed in range(users):
        n += len(run_episode(env, agent, seed=seed))
    return n / (time.perf_counter() - t0)


def lean_loop_trials_per_s(schedule: dict, users: int) -> float:
    """Trials per second of env.step + agent.act + agent.observe alone (no trial table kept)."""
    return timing.looped_trials_per_s(gym.make(ENV_ID, schedule=schedule), agent_from_spec(LEARNER), users)


def batched_trials_per_s(schedule: dict, users: int, fused: bool = True, threads: int = 1,
                         repeats: int = 1) -> float:
    """Trials per second of the batched simulator with the agent's batch policy (best of ``repeats``)."""
    world = make_world(schedule=schedule)
    simulate_users(world, LEARNER, [0, 1], fused=fused, threads=threads)  # warm-up (compiles)
    best = 0.0
    for _ in range(repeats):
        t0 = time.perf_counter()
        sums = simulate_users(world, LEARNER, range(users), fused=fused, threads=threads)
        best = max(best, int(sums.trials.sum()) / (time.perf_counter() - t0))
    return best


def sweep_spec(points: int, users: int) -> dict:
    """A 2 x ``points``-run spec: LHS points x 2 learning agents, ``users`` simulated users each."""
    return {
        "name": "bench_sweep",
        "base": {"schedule": {"sessions": 10, "trials_per_session": 40}},
        "vary": {"design": "lhs", "points": points, "seed": 0, "parameters": {
            "costs.klm.keystroke_s": {"low": 0.08, "high": 1.2},
            "costs.learn.encoding_s": {"low": 0.5, "high": 30.0, "scale": "log"},
            "memory.threshold": {"low": -4.5, "high": -2.5},
        }},
        "agents": [LEARNER, {"name": "rw_choice_kernel"}],
        "seeds": {"first": 0, "count": users},
        "outputs": {"plots": False},
    }


def run(quick: bool = False, out: Out = print, sessions: int = 10, sweep_users: int | None = None,
        skip_batch: bool = False, skip_ray: bool | None = None, families: bool = True, sb3: bool = False) -> None:
    """Print the per-family figures and the held-out style sweep (:mod:`benchmarks.families`, unless
    ``families`` is False; ``sb3`` adds a small PPO model), then both parts. ``sessions`` of 40
    trials per simulated user in part 1; ``sweep_users`` per sweep run in part 2 (default 32, 8
    when ``quick``); Ray is skipped when ``quick`` unless ``skip_ray=False``."""
    if sessions < 1:
        raise ValueError(f"sessions must be >= 1, got {sessions}")
    sweep_users = sweep_users if sweep_users is not None else (8 if quick else 32)
    if sweep_users < 1:
        raise ValueError(f"sweep_users must be >= 1, got {sweep_users}")
    skip_ray = quick if skip_ray is None else skip_ray
    schedule = {"sessions": sessions, "trials_per_session": 40}
    out(f"CartPole-v1 via gymnasium.make: {cartpole_us_per_step():.2f} us/step (machine anchor)")
    if families:
        agent_families.run(quick=quick, out=out, sessions=sessions, sb3=sb3)
    if not skip_batch:
        part_one(schedule, sessions, quick, out)
    if quick:
        part_two(sweep_users, skip_ray, repeats=1, points=10, out=out)
    else:
        part_two(sweep_users, skip_ray, out=out)


def part_one(schedule: dict, sessions: int, quick: bool = False, out: Out = print) -> None:
    """Batched simulator against the looped env + agent (``quick``: up to 1,000 users)."""
    looped = lean_loop_trials_per_s(schedule, users=5)
    recorded = looped_trials_per_s(schedule, users=5)
    out(f"\n1. {LEARNER['name']} on {sessions * 40} trials per user; load average at start {load_average()}")
    out(f"   looped gymnasium.make env + agent per step:  {looped:>14,.0f} trials/s  (1.0x, the reference)")
    out(f"   same via run_episode (keeps a trial table):  {recorded:>14,.0f} trials/s  ({recorded / looped:.2f}x)")
    cores = os.cpu_count() or 1
    variants = [("per-trial batch loop, 1 thread", False, 1), ("fused loop, 1 thread", True, 1),
                (f"fused loop, {cores} threads", True, cores)]
    for label, fused, threads in variants:
        for users in (1, 1_000) if quick else (1, 1_000, 100_000):
            if users == 1 and threads > 1:
                continue
            rate = batched_trials_per_s(schedule, users, fused, threads, repeats=1 if users == 100_000 else 3)
            flag = "meets" if rate / looped >= 100 else "below"
            out(f"   {label + ',':<35} {users:>7,} users: {rate:>12,.0f} trials/s  "
                f"({rate / looped:,.1f}x; target 100x: {flag})")
    out(f"   load average at end {load_average()}")


def _timed_sweep(spec: dict, folder: Path, backend: str | RayBackend) -> tuple[float, float]:
    """(wall seconds, summed in-worker compute seconds of the runs)."""
    t0 = time.perf_counter()
    run_sweep(spec, folder, backend=backend, workers=2, progress=False, write_outputs=False)
    wall = time.perf_counter() - t0
    compute = sum(json.loads(m.read_text())["compute_s"] for m in (folder / "runs").glob("*/meta.json"))
    return wall, compute


def part_two(users: int, skip_ray: bool, repeats: int = 3, points: int = 100, out: Out = print) -> None:
    """A ``2 * points``-run sweep on local processes and on Ray, 2 workers each; best of ``repeats``
    (shared machines are noisy), the backends alternating."""
    spec = sweep_spec(points, users)
    n_runs = 2 * points
    out(f"\n2. {n_runs}-run sweep ({points} LHS points x 2 learning agents, {users} users x 400 trials per run), "
        f"2 workers; best of {repeats}")
    with tempfile.TemporaryDirectory() as tmp:
        ray_backend = None
        t_init = 0.0
        if not skip_ray:
            import ray

            t0 = time.perf_counter()  # Ray started here, so the backend keeps its warm actors between sweeps
            ray.init(num_cpus=2, include_dashboard=False, log_to_driver=False, configure_logging=False)
            ray_backend = RayBackend(workers=2)
            ray_backend.start()
            ray_backend.warm_up(plan_runs(parse_spec(spec))[0])
            t_init = time.perf_counter() - t0
        local_times, ray_times = [], []
        for r in range(repeats):
            local_times.append(_timed_sweep(spec, Path(tmp) / f"local{r}", "local"))
            if ray_backend is not None:
                ray_times.append(_timed_sweep(spec, Path(tmp) / f"ray{r}", ray_backend))
        t_local, c_local = min(local_times)
        out(f"   local processes: {t_local:6.2f} s  ({n_runs / t_local:6.1f} runs/s)  "
            f"[all: {', '.join(f'{t:.2f}' for t, _ in local_times)} s; in-worker compute {c_local:.2f} s]")
        if ray_backend is None:
            return
        ray_backend.close()
        ray.shutdown()
        t_ray, c_ray = min(ray_times)
        overhead = t_ray / t_local - 1
        total = (t_ray + t_init) / t_local - 1
        out(f"   Ray (2 CPUs):    {t_ray:6.2f} s  ({n_runs / t_ray:6.1f} runs/s)  "
            f"[all: {', '.join(f'{t:.2f}' for t, _ in ray_times)} s; in-worker compute {c_ray:.2f} s]")
        verdict = "meets" if overhead <= 0.25 else "above"
        out(f"   Ray overhead on wall time {overhead:+.0%} (target <= +25%: {verdict});"
            f" wall beyond compute/2: local {t_local - c_local / 2:.2f} s, Ray {t_ray - c_ray / 2:.2f} s")
        out(f"   Ray start-up:    {t_init:6.2f} s  (ray.init + workers importing the package, once per session; "
            f"overhead of one sweep including it {total:+.0%})")
        names = sorted(p.name for p in (Path(tmp) / "local0" / "runs").iterdir())
        differ = [r for r in names if (Path(tmp) / "local0" / "runs" / r / "blocks.parquet").read_bytes()
                  != (Path(tmp) / "ray0" / "runs" / r / "blocks.parquet").read_bytes()]
        out(f"   per-run result files: {len(names)} runs, {len(differ)} differing between the backends "
            f"{differ[:3]}")
