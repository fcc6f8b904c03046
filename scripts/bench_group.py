"""Benchmark of group-level inference: model selection on a large group (and hierarchical fitting).

The measurement lives in ``benchmarks.group`` (also ``shortcut-gym bench --suite group``).

Run: .venv/bin/python scripts/bench_group.py [--quick]
"""

from __future__ import annotations

import argparse

from benchmarks import group as bench_group


def main() -> int:
    parser = argparse.ArgumentParser(description=bench_group.__doc__)
    parser.add_argument("--quick", action="store_true", help="small sizes")
    args = parser.parse_args()
    bench_group.run(quick=args.quick)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
