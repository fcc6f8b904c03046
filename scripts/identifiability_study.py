"""Recovery study of the three published learning models on the demo task (Tidepool Logbook).

Parameter recovery (true vs fitted correlation per parameter) and model recovery (confusion by
BIC) of rescorla_wagner, choice_kernel and rw_choice_kernel, each participant on the demo
scenario's default schedule (10 sessions x 40 trials), true parameters drawn over the
documented plausible ranges (``ParamSpec.plausible``). Writes the tables and the figures that
docs/identifiability.md shows into ``--out`` (default docs/images/identifiability) and prints the
tables.

Run: .venv/bin/python scripts/identifiability_study.py [--participants 40] [--starts 5] [--jobs 2]
"""

from __future__ import annotations

import argparse
from pathlib import Path

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.recovery import model_recovery, parameter_recovery
from shortcut_gym.lab.fitting import ModelSpec
from shortcut_gym.lab.report import plot_confusion, plot_parameter_recovery

MODELS = [ModelSpec("rescorla_wagner"), ModelSpec("choice_kernel"), ModelSpec("rw_choice_kernel")]


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--participants", type=int, default=40)
    parser.add_argument("--starts", type=int, default=5)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--out", type=Path, default=Path("docs/images/identifiability"))
    args = parser.parse_args()
    args.out.mkdir(parents=True, exist_ok=True)
    world = make_world()
    fmt = {"float_format": lambda v: f"{v:.2f}", "index": False}
    for j, spec in enumerate(MODELS):
        pairs, summary = parameter_recovery(world, spec, args.participants, seed=10 + j, n_starts=args.starts,
                                            n_jobs=args.jobs)
        summary.to_csv(args.out / f"parameter_recovery_{spec.label}.csv", index=False)
        plot_parameter_recovery(pairs, summary, args.out / f"parameter_recovery_{spec.label}.png")
        print(f"== {spec.label}: {args.participants} participants x {world.horizon} trials")
        cols = ["parameter", "correlation", "rank_correlation", "bias", "rmse", "interval_coverage"]
        print(summary[cols].to_string(**fmt))
    confusion, fits = model_recovery(world, MODELS, args.participants, seed=20, n_starts=args.starts, n_jobs=args.jobs)
    confusion.to_csv(args.out / "model_confusion.csv")
    plot_confusion(confusion, args.out / "model_confusion.png")
    print("== model recovery (rows: generating model, columns: winner by BIC)")
    print(confusion.to_string(float_format=lambda v: f"{v:.2f}"))
    print(f"fits flagged not ok: {int((~fits['fit_ok']).sum())} of {len(fits)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
