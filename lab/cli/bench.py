"""``shortcut-gym bench``: run the benchmark suites, each figure a ratio against a reference timed in
the same run (e.g. CartPole-v1's step), never a bare time to compare across machines."""

from __future__ import annotations

import argparse
import importlib
import sys
import time
from pathlib import Path

from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import status

#: Suite name -> module with ``run(quick, out)``, in the order ``bench`` runs them by default.
SUITES: dict[str, str] = {
    "env": "benchmarks.env",
    "agents": "benchmarks.agents",
    "fit": "benchmarks.fit",
    "sweep": "benchmarks.sweep",
    "group": "benchmarks.group",
}


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``bench`` subcommand."""
    p = sub.add_parser("bench", help="run the benchmarks, printing ratios against references timed in the same run")
    p.add_argument("--suite", action="append", default=None, metavar="NAME",
                   help=f"suite to run (repeatable; default all): {', '.join(SUITES)}")
    p.add_argument("--quick", action="store_true",
                   help="small sizes (fewer repeats, users and horizons; no Ray, no 100,000-user point)")
    p.set_defaults(func=run)


def chosen_suites(names: list[str] | None) -> list[str]:
    """The suites to run, in the order given, each once; every suite when ``names`` is None."""
    if names is None:
        return list(SUITES)
    unknown = [n for n in names if n not in SUITES]
    if unknown:
        raise CLIError(f"--suite: unknown suite {', '.join(map(repr, unknown))}; known suites: {', '.join(SUITES)}")
    return list(dict.fromkeys(names))


def benchmarks_folder() -> Path:
    """``scripts/`` of the source checkout this package runs from (benchmarks are not in the wheel)."""
    scripts = Path(__file__).resolve().parents[2] / "scripts"
    if not (scripts / "benchmarks" / "__init__.py").is_file():
        raise CLIError("bench: the benchmark suites ship with the source checkout (scripts/benchmarks/), "
                       "not with the installed package; run this from an editable install of a clone")
    return scripts


def run(args: argparse.Namespace) -> int:
    """Run each chosen suite, printing its figures and its own wall time."""
    suites = chosen_suites(args.suite)
    scripts = str(benchmarks_folder())
    if scripts not in sys.path:
        sys.path.insert(0, scripts)
    size = "quick" if args.quick else "full size"
    for i, name in enumerate(suites):
        module = importlib.import_module(SUITES[name])
        print(f"{chr(10) if i else ''}=== bench {name} ({size})", flush=True)
        t0 = time.perf_counter()
        module.run(quick=args.quick, out=lambda line: print(line, flush=True))
        status(f"=== bench {name} took {time.perf_counter() - t0:.1f} s")
    return 0
