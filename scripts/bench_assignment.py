"""Hotkey assignment at scale, and the heuristic's gap on a family of small command sets.

1. 200 generated Tidepool Logbook commands, budget 30, a pool of 10 single keys, 26 one-modifier
   and 26 two-modifier chords: wall time of the planner's saving table (one MDP per command,
   solved for 3 key counts) and of the exact solver (milp) and the heuristic. Target: under 10 s
   in all. Reference timed in the same run: ``plan_world`` on the 12-command demo world.
2. Gap of the heuristic (greedy + local search, and greedy alone) against the exact optimum on
   every instance of a family of small command sets (2-8 commands, random menus and usage
   weights, budgets 1-4, pools of 2-6 combinations).
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from shortcut_gym.agents.planner import plan_world
from shortcut_gym.envs import make_world
from shortcut_gym.lab.design.assignment import (
    combo_pool,
    planner_savings,
    solve_exact,
    solve_greedy,
    synthetic_scenario,
)


def small_family(n_instances: int, seed: int) -> list[tuple[object, list, int]]:
    """(saving table, pool, budget) of random small command sets priced by the planner."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n_instances):
        n = int(rng.integers(2, 9))
        sc = synthetic_scenario(n, items_per_menu=int(rng.integers(1, 5)))
        weights = rng.dirichlet(np.ones(n) * 0.7)
        for menu in sc["menus"]:
            for item in menu["items"]:
                item["weight"] = float(weights[int(item["name"][-3:]) - 1]) + 1e-3
        typist = str(rng.choice(["good_typist", "average_skilled_typist", "average_non_secretary"]))
        world = make_world(sc, costs={"klm": {"typist": typist}}, schedule={"sessions": 6, "trials_per_session": 30})
        table = planner_savings(world, n_bins=20)
        pool = combo_pool(*(int(v) for v in rng.integers(0, 3, size=3) + np.array([1, 0, 1])))
        out.append((table, pool, int(rng.integers(1, 5))))
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--commands", type=int, default=200)
    parser.add_argument("--budget", type=int, default=30)
    parser.add_argument("--family", type=int, default=60, help="small instances for the gap")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--sessions", type=int, default=40, help="sessions of 50 trials per user")
    args = parser.parse_args(argv)

    demo = make_world()
    plan_world(demo, n_bins=20)  # numba compiles, caches fill
    t0 = time.perf_counter()
    plan_world(demo)
    ref = time.perf_counter() - t0
    print(f"reference: plan_world on the 12-command demo world {ref:.2f} s")

    schedule = {"sessions": args.sessions, "trials_per_session": 50}
    world = make_world(synthetic_scenario(args.commands), schedule=schedule)
    pool = combo_pool(single=10, one_modifier=26, two_modifier=26)
    t0 = time.perf_counter()
    table = planner_savings(world)
    t_table = time.perf_counter() - t0
    S = table.for_combos(pool)
    t0 = time.perf_counter()
    exact = solve_exact(S, args.budget)
    t_exact = time.perf_counter() - t0
    t0 = time.perf_counter()
    heur = solve_greedy(S, args.budget)
    t_heur = time.perf_counter() - t0
    total = t_table + t_exact
    print(f"{args.commands} commands, budget {args.budget}, pool of {len(pool)}: saving table {t_table:.2f} s, "
          f"milp {t_exact:.3f} s, heuristic {t_heur:.3f} s; table + exact {total:.2f} s "
          f"({total / ref:.1f}x the reference; target under 10 s: {'met' if total < 10 else 'NOT met'})")
    print(f"  exact saving {exact.saving_s:.2f} s per user with {len(exact.pairs)} hotkeys, heuristic "
          f"{heur.saving_s:.2f} s (gap {(exact.saving_s - heur.saving_s) / exact.saving_s:.2e})")

    gaps, greedy_gaps = [], []
    for table, pool, budget in small_family(args.family, args.seed):
        S = table.for_combos(pool)
        best = solve_exact(S, budget).saving_s
        if best <= 0:
            continue
        gaps.append((best - solve_greedy(S, budget).saving_s) / best)
        greedy_gaps.append((best - solve_greedy(S, budget, local_search=False).saving_s) / best)
    g, gg = np.maximum(gaps, 0.0), np.maximum(greedy_gaps, 0.0)
    print(f"small family: {len(g)} instances with a positive optimum (of {args.family}); heuristic gap "
          f"mean {g.mean():.2e}, max {g.max():.2e}, optimal on {np.mean(g < 1e-9):.0%}; greedy alone "
          f"mean {gg.mean():.2e}, max {gg.max():.2e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
