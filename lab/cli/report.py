"""``shortcut-gym report``: fit, compare and check models on a log, into one report folder."""

from __future__ import annotations

import argparse

from shortcut_gym.lab.cli.options import (
    add_common,
    add_skip_bad,
    claim_output,
    models_of,
    priors_of,
    report_skipped,
    start_ranges_of,
    world_of,
    world_words,
)
from shortcut_gym.lab.cli.ranges import input_file, whole_number
from shortcut_gym.lab.cli.yardstick import add_planner_options
from shortcut_gym.lab.data.logs import read_log
from shortcut_gym.lab.report import analyse_log


def _block(text: str) -> str | int:
    if text == "session":
        return text
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be 'session' or a whole number of trials >= 1, got {text!r}")
    return value


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``report`` subcommand."""
    p = sub.add_parser("report", help="fit + compare + posterior-predictive check (+ knock-out) into a folder")
    p.add_argument("log", type=input_file, help="trial log (.csv or .parquet)")
    add_common(p)
    add_skip_bad(p)
    p.add_argument("--prior", action="append", default=None, help="label:param=family:a:b (MAP), repeatable")
    p.add_argument("--sims", type=whole_number(1), default=50, help="simulated replicates per participant x model")
    p.add_argument("--block", type=_block, default="session", help="'session' or trials per block")
    p.add_argument("--knockout", default=None, help="label of a learning model whose mechanisms to knock out")
    p.add_argument("--rationality", action="store_true",
                   help="add the yardstick section: each participant against the planner in their own world "
                        "(the --model models are the learning models it is compared with)")
    add_planner_options(p)
    p.add_argument("--hierarchical", action="store_true",
                   help="also fit each model hierarchically and weigh its integrated BIC in the verdict")
    p.add_argument("--cross-validate", action="store_true",
                   help="also compare models on held-out sessions (leave one out) and weigh it in the verdict")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write the report folder and print the summed criteria."""
    claim_output(args.out, args)
    world = world_of(args)
    specs = models_of(args)
    log = read_log(args.log, world.commands, args.skip_bad_participants)
    report_skipped(log)
    index, tables = analyse_log(log, specs, world, args.out, args.starts, args.seed, args.jobs, args.sims,
                                args.block, priors_of(args.prior, specs), args.knockout, not args.quiet,
                                args.hierarchical, args.cross_validate, intervals=args.intervals,
                                start_ranges=start_ranges_of(args.start_range, specs),
                                extra_sections=[("Study world", world_words(world, args)
                                                 + " The posterior-predictive simulations run on it.")])
    print(tables["summed"].to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    print(tables["bms"].to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    print(f"report in {index.parent}")
    return 0
