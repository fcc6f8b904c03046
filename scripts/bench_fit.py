"""Benchmark of the lab's fitting: compiled versus plain likelihood, and a 3-model fit.

The measurement lives in ``benchmarks.fit`` (also ``shortcut-gym bench --suite fit``); ``--group`` runs
the group-level suite instead (``benchmarks.group``: hierarchical EM on 100 participants x 500 trials,
model selection on 10,000 participants x 5 models).

Run: .venv/bin/python scripts/bench_fit.py [--participants 50] [--starts 10] [--jobs 2]
     [--rationality-participants 50] | [--rationality-only] | [--group]
"""

from __future__ import annotations

import argparse

from benchmarks import fit as bench_fit
from benchmarks import group as bench_group


def main() -> int:
    parser = argparse.ArgumentParser(description=bench_fit.__doc__)
    parser.add_argument("--participants", type=int, default=50)
    parser.add_argument("--starts", type=int, default=10)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--rationality-participants", type=int, default=50)
    parser.add_argument("--rationality-only", action="store_true", help="run only part 3, the rationality analysis")
    parser.add_argument("--group", action="store_true", help="run the group-level suite (hierarchical EM, BMS)")
    args = parser.parse_args()
    if args.rationality_only:
        bench_fit.rationality(False, print, args.rationality_participants, args.jobs)
        return 0
    if args.group:
        bench_group.run(quick=False)
        return 0
    bench_fit.run(quick=False, participants=args.participants, starts=args.starts, jobs=args.jobs,
                  rationality_participants=args.rationality_participants)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
