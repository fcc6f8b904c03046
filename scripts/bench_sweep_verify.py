"""Cost of checking a finished sweep folder on resume, on a 1,000-run folder (target: under 2 s).

Builds a folder of ``--runs`` tiny runs (a grid over the keystroke time, one agent, 2 users of
one 4-trial session each), then times, as medians of ``--repeats``:

* ``check``: the digest check a resume makes (every file of every finished run hashed once);
* ``resume``: a whole resume with nothing to do (plan, lock, check, manifest rewrite; no outputs);
* the reference, timed in the same run: reading every run's result table with pandas, which a
  resume's outputs step does anyway.

Prints the wall times and the ratios against the reference.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from benchmarks.timing import median_seconds  # noqa: E402

from shortcut_gym.lab.sweep.plan import plan_runs  # noqa: E402
from shortcut_gym.lab.sweep.runner import run_sweep  # noqa: E402
from shortcut_gym.lab.sweep.spec import parse_spec  # noqa: E402
from shortcut_gym.lab.sweep.store import SweepStore  # noqa: E402


def spec_of(runs: int) -> dict:
    """A sweep of ``runs`` tiny runs."""
    return {
        "name": "verify_bench",
        "base": {"schedule": {"sessions": 1, "trials_per_session": 4}},
        "vary": {"design": "grid", "parameters": {"costs.klm.keystroke_s": {"low": 0.08, "high": 1.2,
                                                                             "steps": runs}}},
        "agents": [{"name": "always_menu"}],
        "seeds": {"first": 0, "count": 2},
        "outputs": {"plots": False},
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--runs", type=int, default=1000, help="runs in the folder")
    parser.add_argument("--repeats", type=int, default=5, help="timed repeats (median)")
    parser.add_argument("--workers", type=int, default=2, help="worker processes to fill the folder")
    args = parser.parse_args(argv)
    spec = spec_of(args.runs)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "sweep"
        t0 = time.perf_counter()
        report = run_sweep(spec, folder, workers=args.workers, progress=False, write_outputs=False)
        print(f"filled {folder.name}: {report.computed} runs in {time.perf_counter() - t0:.1f} s")
        runs = plan_runs(parse_spec(spec))
        store = SweepStore(folder)
        check = store.check()
        assert check.intact and len(check.of("ok")) == args.runs, check.lines()[0]
        t_check = median_seconds(lambda: SweepStore(folder).check(), args.repeats, warm_up=True)
        t_resume = median_seconds(lambda: run_sweep(spec, folder, workers=1, progress=False, write_outputs=False),
                                  args.repeats, warm_up=True)

        def read_all() -> None:
            s = SweepStore(folder)
            s.check()
            s.read_table(runs, "blocks")

        t_read = median_seconds(read_all, args.repeats, warm_up=True) - t_check
        print(f"check of {args.runs} finished runs: {t_check:.3f} s (target < 2 s)")
        print(f"whole resume with nothing to compute: {t_resume:.3f} s")
        print(f"reference, reading every run's result table: {t_read:.3f} s")
        print(f"ratio check / reference read: {t_check / t_read:.2f}")
        print(f"ratio resume / reference read: {t_resume / t_read:.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
