"""``shortcut-gym report``: fit, compare and check models on a log, into one report folder."""

from __future__ import annotations

import argparse

from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import (
    add_log_fit_options,
    covariance_of,
    log_fit_inputs,
    refuse_planner_world,
    status,
    world_words,
)
from shortcut_gym.lab.cli.ranges import whole_number
from shortcut_gym.lab.cli.world_note import reading_line, world_given, write_note
from shortcut_gym.lab.cli.yardstick import add_planner_options, planner_options_of
from shortcut_gym.lab.rationality import PLANNED, rationality_analysis
from shortcut_gym.lab.rationality.report import verdict_scope, write_rationality
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
    add_log_fit_options(p, "weigh its integrated BIC in the verdict",
                        "weigh that comparison in the verdict")
    p.add_argument("--sims", type=whole_number(1), default=50, help="simulated replicates per participant x model")
    p.add_argument("--block", type=_block, default="session", help="'session' or trials per block")
    p.add_argument("--knockout", default=None, help="label of a learning model whose mechanisms to knock out")
    p.add_argument("--rationality", action="store_true",
                   help="add the yardstick section: each participant against the planner in their own world "
                        "(the --model models are the learning models it is compared with)")
    add_planner_options(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write the report folder and print the summed criteria."""
    world, specs, priors, ranges, log = log_fit_inputs(args)
    entries: list = []
    sections: list = []
    note = ""
    learning = [s for s in specs if s.name != PLANNED]
    if args.rationality:
        refuse_planner_world(world, "report --rationality")
        if any(s.label == PLANNED for s in learning):
            raise CLIError(f"--model: a learning model is labelled {PLANNED!r}, the name of the yardstick's own "
                           "choice model; give it another label")
    status(reading_line(specs, world_given(args)) + "; the posterior-predictive simulations run in it"
           + (", and the yardstick plans in it" if args.rationality else ""))
    if args.rationality:
        n = log["participant"].nunique()
        status(f"rationality: each of {n} participant{'' if n == 1 else 's'} against the planner in their "
               "own world")
        result = rationality_analysis(log, world, learning, planner_options_of(args), args.starts, args.seed,
                                      args.jobs, args.duration_noise, args.optimum_sims, progress=not args.quiet)
        entries, sections = write_rationality(result, args.out)  # beside the report's own files, no name shared
        note = verdict_scope(result)
    args.out.mkdir(parents=True, exist_ok=True)
    entries = [*entries, (write_note(args.out, world, args, specs),
                          "the world the fits were made in (compare checks the world it is given against it)")]
    index, tables = analyse_log(log, specs, world, args.out, args.starts, args.seed, args.jobs, args.sims,
                                args.block, priors, args.knockout, not args.quiet,
                                args.hierarchical, args.cross_validate, intervals=args.intervals,
                                start_ranges=ranges, covariance=covariance_of(args),
                                extra_sections=[("Study world", world_words(world, args)
                                                 + " The posterior-predictive simulations run on it."), *sections],
                                extra_entries=entries, verdict_note=note)
    print(tables["summed"].to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    print(tables["bms"].to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    status(f"report in {index.parent}")
    return 0
