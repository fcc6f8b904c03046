"""``shortcut-gym fit``: fit models to a trial log, one row per participant x model."""

from __future__ import annotations

import argparse

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.cli.options import add_common, add_skip_bad, models_of, priors_of, report_skipped
from shortcut_gym.lab.cli.ranges import input_file
from shortcut_gym.lab.data.logs import read_log
from shortcut_gym.lab.fitting import context_for, fit_log


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``fit`` subcommand."""
    p = sub.add_parser("fit", help="fit models to a trial log by maximum likelihood (or MAP with --prior)")
    p.add_argument("log", type=input_file, help="trial log (.csv or .parquet)")
    add_common(p)
    add_skip_bad(p)
    p.add_argument("--prior", action="append", default=None,
                   help="label:param=family:a:b (normal, beta, gamma, lognormal) for a MAP fit (repeatable)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Fit and write ``fits.csv``."""
    world = make_world(args.scenario)
    specs = models_of(args)
    priors = priors_of(args.prior, specs)
    log = read_log(args.log, world.commands, args.skip_bad_participants)
    report_skipped(log)
    fits = fit_log(log, specs, context_for(log, world.commands.names), args.starts, args.seed, args.jobs, priors,
                   progress=not args.quiet)
    args.out.mkdir(parents=True, exist_ok=True)
    path = args.out / "fits.csv"
    fits.to_csv(path, index=False)
    show = fits[["participant", "model", "loglik", "n_params", "aic", "bic", "converged"]]
    print(show.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    print(f"wrote {path}")
    return 0
