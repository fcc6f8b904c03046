"""Benchmark of the lab's fitting: compiled versus plain likelihood, and a 3-model fit.

The measurement lives in ``benchmarks.fit`` (also ``shortcut-gym bench --suite fit``).

Run: .venv/bin/python scripts/bench_fit.py [--participants 50] [--starts 10] [--jobs 2]
"""

from __future__ import annotations

import argparse

from benchmarks import fit as bench_fit


def main() -> int:
    parser = argparse.ArgumentParser(description=bench_fit.__doc__)
    parser.add_argument("--participants", type=int, default=50)
    parser.add_argument("--starts", type=int, default=10)
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args()
    bench_fit.run(quick=False, participants=args.participants, starts=args.starts, jobs=args.jobs)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
