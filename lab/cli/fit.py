"""``shortcut-gym fit``: fit models to a trial log, one row per participant x model."""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from shortcut_gym.lab.cli.options import add_log_fit_options, covariance_of, detail, log_fit_inputs, status, warn
from shortcut_gym.lab.cli.world_note import reading_line, world_given, write_note
from shortcut_gym.lab.fitting import (
    HierarchicalFit,
    context_for,
    cross_validate,
    cv_summary,
    cv_table,
    fit_hierarchical_models,
    fit_log,
    hierarchical_tables,
    long_table,
)


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``fit`` subcommand."""
    p = sub.add_parser("fit", help="fit models to a trial log by maximum likelihood (or MAP with --prior)")
    add_log_fit_options(p, "write its group parameters, MAPs with posterior SDs and integrated BIC",
                        "write cv_folds.csv, cv.csv")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Fit and write ``fits.csv`` (one row per participant x model) and ``parameters.csv`` (long)."""
    world, specs, priors, ranges, log = log_fit_inputs(args)
    status(reading_line(specs, world_given(args)))
    context = context_for(log, world.commands.names, world)  # agents may plan with the world
    fits = fit_log(log, specs, context, args.starts, args.seed, args.jobs, priors,
                   progress=not args.quiet, start_ranges=ranges, intervals=args.intervals)
    args.out.mkdir(parents=True, exist_ok=True)
    path = args.out / "fits.csv"
    fits.to_csv(path, index=False)
    long_table(fits).to_csv(args.out / "parameters.csv", index=False)
    note = write_note(args.out, world, args, specs)
    show = fits[["participant", "model", "loglik", "n_params", "aic", "bic", "fit_ok"]]
    print(show.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    doubtful = fits[~fits["fit_ok"]]
    if len(doubtful):
        warn(f"{len(doubtful)} doubtful fit(s):")
        for _, r in doubtful.iterrows():
            warn(f"  {r['participant']} / {r['model']}: {r['fit_issues']}")
    status(f"wrote {path}, {args.out / 'parameters.csv'} and {note} (the world of the fits, which compare checks)")
    if args.hierarchical:
        covariance = covariance_of(args)
        detail(f"fitting hierarchically ({covariance} group covariance)")
        summary, by_model = fit_hierarchical_models(log, specs, context, args.starts, args.seed, covariance)
        written = write_hierarchical(summary, by_model, args.out)
        print(summary.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
        status("wrote " + ", ".join(str(p) for p in written))
    if args.cross_validate:
        detail("cross-validating: leave one session out")
        folds = cross_validate(log, specs, context, args.starts, args.seed)
        folds.to_csv(args.out / "cv_folds.csv", index=False)
        cv_table(folds).to_csv(args.out / "cv.csv", index=False)
        print(cv_summary(folds).to_string(index=False, float_format=lambda v: f"{v:.2f}"))
        status(f"wrote {args.out / 'cv_folds.csv'}, {args.out / 'cv.csv'}")
    return 0


def write_hierarchical(summary: pd.DataFrame, by_model: dict[str, HierarchicalFit], out: Path) -> list[Path]:
    """``hierarchical.csv`` (per model: evidence, iBIC), ``hierarchical_group.csv`` (group mean and SD
    per parameter) and ``hierarchical_participants.csv`` (MAPs with posterior SDs) in ``out``."""
    paths = [out / "hierarchical.csv", out / "hierarchical_group.csv", out / "hierarchical_participants.csv"]
    summary.to_csv(paths[0], index=False)
    groups, participants = hierarchical_tables(by_model)
    groups.to_csv(paths[1], index=False)
    participants.to_csv(paths[2], index=False)
    return paths
