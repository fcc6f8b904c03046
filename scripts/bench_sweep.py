"""Sweeps at scale: batched simulator versus the gym loop, and a 200-run sweep local versus Ray.

The measurement lives in ``benchmarks.sweep`` (also ``shortcut-gym bench --suite sweep``).
"""

from __future__ import annotations

import argparse

from benchmarks import sweep as bench_sweep


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=bench_sweep.__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--sessions", type=int, default=10, help="sessions of 40 trials per simulated user")
    parser.add_argument("--sweep-users", type=int, default=32, help="simulated users per sweep run")
    parser.add_argument("--skip-batch", action="store_true", help="skip part 1")
    parser.add_argument("--skip-ray", action="store_true", help="skip the Ray half of part 2")
    args = parser.parse_args(argv)
    bench_sweep.run(quick=False, sessions=args.sessions, sweep_users=args.sweep_users,
                    skip_batch=args.skip_batch, skip_ray=args.skip_ray)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
