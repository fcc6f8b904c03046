"""Sweeps at scale: trials per second per agent family (against the looped gym env + agent and
gymnasium's native CartPole vector env) and the held-out style sweep, then the batched simulator
versus the gym loop and a 200-run sweep local versus Ray.

The measurement lives in ``benchmarks.families`` and ``benchmarks.sweep`` (also
``shortcut-gym bench --suite sweep``).
"""

from __future__ import annotations

import argparse

from benchmarks import families
from benchmarks import sweep as bench_sweep


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=bench_sweep.__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--sessions", type=int, default=10, help="sessions of 40 trials per simulated user")
    parser.add_argument("--sweep-users", type=int, default=32, help="simulated users per sweep run")
    parser.add_argument("--skip-batch", action="store_true", help="skip part 1")
    parser.add_argument("--skip-ray", action="store_true", help="skip the Ray half of part 2")
    parser.add_argument("--skip-families", action="store_true",
                        help="skip the per-family figures and the held-out style sweep")
    parser.add_argument("--families-only", action="store_true", help="only the per-family figures and the sweep")
    parser.add_argument("--sb3", action="store_true", help="add a small PPO model to the families (trains it)")
    names = "; ".join(name for name, _, _ in families.FAMILIES)
    parser.add_argument("--only", action="append", default=[], metavar="TEXT",
                        help="with --families-only: time only the families whose name contains TEXT as a "
                             f"substring (the names: {names}); part C (planned_choice batched vs per-user) runs "
                             "when the planned_choice family is selected (TEXT 'planner', 'planned' or 'choice'), "
                             "the held-out style sweep when TEXT is 'sweep'; repeatable, a family is selected "
                             "when any TEXT matches")
    args = parser.parse_args(argv)
    if args.only and not args.families_only:
        parser.error("--only selects among the per-family figures: give it with --families-only")
    unmatched = [o for o in args.only if o != "sweep" and not families.selected_families((o,))]
    if unmatched:
        parser.error(f"--only {unmatched[0]!r} is part of no family name; the families: {names}")
    if args.families_only:
        families.run(quick=False, sessions=args.sessions, sb3=args.sb3, only=tuple(args.only))
        return 0
    bench_sweep.run(quick=False, sessions=args.sessions, sweep_users=args.sweep_users,
                    skip_batch=args.skip_batch, skip_ray=args.skip_ray, families=not args.skip_families,
                    sb3=args.sb3)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
