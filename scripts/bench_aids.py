"""Interface-aid study at scale: 5 aids x 4 population settings x 1,000 users, on 2 threads.

The bundled study (configs/studies/tidepool_aids.yaml: five aids against the aid-free app, four
KLM typist classes, six sessions of 40 trials) run with its batched agents (a learning model and
fixed baselines; each (typist, agent) cell simulates the aid-free world and the five aids, so
6 x 4 = 24 worlds x 1,000 users per agent). Target: under 1 minute on 2 cores per agent. The
planner (one Python object per user) is timed on its own with ``--planner-users``. Reference
timed in the same run: the same users of the aid-free world with always-menu on one thread.
"""

from __future__ import annotations

import argparse
import time

from shortcut_gym.lab.design.aid_study import StudyAgent, load_study, run_study
from shortcut_gym.lab.sweep.batch import simulate_users
from shortcut_gym.lab.sweep.plan import world_from_settings
from shortcut_gym.lab.sweep.spec import SeedBlock, SweepSpec, base_settings


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--users", type=int, default=1000)
    parser.add_argument("--threads", type=int, default=2)
    parser.add_argument("--agents", default="rescorla_wagner,always_menu,learn_first_k",
                        help="comma-separated batched agents, each timed on its own")
    parser.add_argument("--planner-users", type=int, default=0, help="also time the planner on this many users")
    args = parser.parse_args(argv)
    spec, aids = load_study("tidepool_aids")
    users = SeedBlock(first=0, count=args.users)
    world = world_from_settings(base_settings(SweepSpec(name="ref", base=spec.base, agents=spec.agents[:1],
                                                        seeds=users)))
    simulate_users(world, {"name": "always_menu"}, range(8))  # compile
    t0 = time.perf_counter()
    simulate_users(world, {"name": "always_menu"}, range(args.users))
    ref = time.perf_counter() - t0
    print(f"reference: always-menu, {args.users} users of the aid-free world, 1 thread: {ref:.3f} s")
    names = [a for a in args.agents.split(",") if a]
    if args.planner_users:
        names.append("bounded_optimal")
    for name in names:
        entry = StudyAgent(name=name, params={"k": 1} if name == "learn_first_k" else {})
        count = args.planner_users if name == "bounded_optimal" else args.users
        study = spec.model_copy(update={"agents": [entry], "users": SeedBlock(first=0, count=count)})
        run_study(study.model_copy(update={"users": SeedBlock(first=0, count=4)}), aids, threads=1)  # compile
        t0 = time.perf_counter()
        table = run_study(study, aids, threads=args.threads)
        wall = time.perf_counter() - t0
        worlds = len(spec.population.values) * (len(aids) + 1)
        print(f"{name}: {len(aids)} aids x {len(spec.population.values)} populations x {count} users "
              f"({worlds} worlds, {len(table)} ranking rows) on {args.threads} threads: {wall:.2f} s "
              f"= {wall / ref:.1f} x the reference")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
