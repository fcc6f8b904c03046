"""Where the planner's compiled decision spends its time, and the floor bit-for-bit equality leaves.

CPU seconds per trial (``time.process_time``: other processes on the cores inflate it less than
wall time) of the fused compiled loops on the default world, 10 sessions of 40 trials: always-menu
and learn-first-1 (the simulator alone; the second learns each command once and then uses its
hotkey, close to the planner's mix of actions, whose hotkey trials cost the simulator a recall),
the Rescorla-Wagner learning model and the planner. Then the throughput of
each libm function the planner's decision calls (a numba loop of independent calls) and the
number of calls per decision, counted from the plan's lookup tables; together they give the
floor: the simulator plus those calls, with everything else free. The compiled decision must
equal the Python planner's bit for bit, so every one of those calls is made as the Python side
makes it (no vectorised or approximate logarithm or exponential). Last, the floor as trials per
second against the looped gymnasium env + planner and gymnasium's CartPole vector env, both
measured (wall time) in this run; the load average is printed beside the figures.
"""

from __future__ import annotations

import argparse
import math
import time
from typing import Any

import numpy as np
from benchmarks import families
from benchmarks.timing import load_average
from numba import njit

from shortcut_gym.agents.planner.compiled_lookup import I_KIND, MEM_HYBRID, lookup_tables
from shortcut_gym.envs import make_world
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.lab.sweep.batch import build_agent

LIBM = ("log", "exp", "log1p", "expm1")


@njit(cache=True)
def _libm_loop(which: int, x: np.ndarray, reps: int) -> float:
    """Sum of ``reps`` passes of one libm function over ``x`` (independent calls)."""
    s = 0.0
    for _ in range(reps):
        for i in range(x.shape[0]):
            v = x[i]
            if which == 0:
                s += math.log(v)
            elif which == 1:
                s += math.exp(-v)
            elif which == 2:
                s += math.log1p(v)
            else:
                s += math.expm1(-v)
    return s


def libm_ns(reps: int = 400) -> dict[str, float]:
    """CPU nanoseconds per call of each function of :data:`LIBM` (best of 5)."""
    x = np.random.default_rng(0).uniform(0.01, 5.0, 4096)
    out = {}
    for which, name in enumerate(LIBM):
        _libm_loop(which, x, 1)
        best = math.inf
        for _ in range(5):
            t0 = time.process_time()
            _libm_loop(which, x, reps)
            best = min(best, time.process_time() - t0)
        out[name] = best / (reps * x.shape[0]) * 1e9
    return out


def calls_per_decision(tables: Any, p_use: np.ndarray) -> dict[str, float]:
    """Mean libm calls of one decision (commands weighted by their probability, trials equally):
    the tracked activation now and at each distinct next-use point (a logarithm, and the hybrid
    lump's log1p and expm1 when it holds traces: counted always, an upper bound), e^A at each
    point, the four new-trace logarithms per point, the four weight logarithms and the recall
    probability's and latency's exponentials. Upper bounds: a memory with no trace yet skips most."""
    future = tables.value_row >= 0  # (commands, horizon)
    distinct = np.zeros(future.shape)
    distinct[:, :-1] = (tables.same_point < 0).sum(axis=-1)
    points = np.where(future, distinct, 0.0)
    hybrid = int(tables.ints[I_KIND]) == MEM_HYBRID
    weights = tables.grid.n_weight > 1
    log = 1 + points + 4 * points + np.where(future & weights, 4, 0)
    exp = 2 + points
    lump = (1 + points) if hybrid else np.zeros(points.shape)
    w = p_use / p_use.sum()
    mean = {name: float((w[:, None] * a).sum(axis=0).mean()) for name, a in
            (("log", log), ("exp", exp), ("log1p", lump), ("expm1", lump))}
    mean["points"] = float((w[:, None] * points).sum(axis=0).mean())
    return mean


def fused_ns(world: Any, spec: dict[str, Any], users: int, repeats: int = 3) -> tuple[float, float]:
    """CPU and wall nanoseconds per trial of an agent's fused compiled run (each the best of
    ``repeats`` after a warm-up)."""
    agent = build_agent(spec, world)
    if hasattr(agent, "prepare"):
        agent.prepare()
    seeds = list(range(users))
    cpu = wall = math.inf
    for i in range(repeats + 1):
        sim = BatchSimulator(world)
        sim.reset(seeds=seeds)
        policy = agent.batch_policy(users, seeds)
        t0, w0 = time.process_time(), time.perf_counter()
        policy.run(sim)
        if i:
            cpu = min(cpu, time.process_time() - t0)
            wall = min(wall, time.perf_counter() - w0)
    n = users * world.horizon
    return cpu / n * 1e9, wall / n * 1e9


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--users", type=int, default=1024, help="simulated users per fused run")
    args = parser.parse_args(argv)
    schedule = {"sessions": 10, "trials_per_session": 40}
    world = make_world(schedule=schedule)
    print(f"Planner decision floor, {world.horizon} trials per user, {args.users:,} users; load average "
          f"{load_average()}")
    planner = {"name": "bounded_optimal"}
    loops = {name: fused_ns(world, spec, args.users) for name, spec in (
        ("always_menu", {"name": "always_menu"}),
        ("learn_first_k(k=1)", {"name": "learn_first_k", "params": {"k": 1}}),
        ("rescorla_wagner", {"name": "rescorla_wagner"}),
        ("bounded_optimal", planner))}
    for name, (ns, wall) in loops.items():
        print(f"   fused loop {name:<30} {ns:8.1f} ns/trial CPU  ({1e9 / ns:12,.0f} trials/s; wall {wall:8.1f} ns)")
    agent = build_agent(planner, world)
    agent.prepare()
    agent.reset()
    tables = lookup_tables(agent)
    assert tables is not None
    calls = calls_per_decision(tables, np.asarray(world.commands.probability, dtype=float))
    cost = libm_ns()
    libm_total = sum(calls[f] * cost[f] for f in LIBM)
    print(f"   decision: {calls['points']:.2f} distinct next-use points on average; libm calls "
          + ", ".join(f"{f} {calls[f]:.1f} x {cost[f]:.1f} ns" for f in LIBM) + f" = {libm_total:.0f} ns")
    sim_ns = loops["learn_first_k(k=1)"][0]
    plan_ns, plan_wall = loops["bounded_optimal"]
    floor = sim_ns + libm_total
    print(f"   floor (simulator under learn-first-1 + libm calls, nothing else): {floor:.0f} ns/trial = "
          f"{1e9 / floor:,.0f} trials/s; "
          f"the planner's loop is {plan_ns / floor:.2f}x the floor")
    cart = families.cartpole_vector_steps_per_s()
    floor_rate = 1e9 / (floor * plan_wall / plan_ns)  # trials/s of the floor in this run's wall time
    looped = families.looped_trials_per_s(planner, schedule, users=2)
    print(f"   references (wall): CartPole-v1 vector env {cart:,.0f} steps/s, looped env + planner {looped:,.0f} "
          f"trials/s; the planner's loop (wall) {1e9 / plan_wall / cart:.2f}x CartPole vec and "
          f"{1e9 / plan_wall / looped:,.0f}x looped (targets 0.5x and 100x); at the floor "
          f"{floor_rate / cart:.2f}x and {floor_rate / looped:,.0f}x (the floor at the loop's wall/CPU ratio)")
    print(f"   load average at end {load_average()}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
