"""``shortcut-gym yardstick``: was each participant bounded-optimal given their own costs?

Fits each participant's operator times to their trial durations, plans for the world they imply,
scores their choices against the plan and fits the planned-choice model against the learning
models given with ``--model``; writes tables, plots and ``index.md`` into ``--out``.
"""

from __future__ import annotations

import argparse
import time

from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import (
    MODEL_HELP,
    add_common,
    add_model_options,
    add_skip_bad,
    claim_output,
    detail,
    models_of,
    refuse_planner_world,
    report_skipped,
    status,
    world_of,
    world_words,
)
from shortcut_gym.lab.cli.ranges import input_file, whole_number
from shortcut_gym.lab.data.logs import read_log
from shortcut_gym.lab.rationality import DEFAULT_SIMS, PLANNED, PlannerOptions, rationality_analysis
from shortcut_gym.lab.rationality.report import HEADLINE_COLUMNS, write_rationality
from shortcut_gym.lab.report.markdown import write_index


def add_planner_options(p: argparse.ArgumentParser) -> None:
    """The yardstick planner's grid and selection options, and the duration likelihood."""
    p.add_argument("--plan-bins", type=whole_number(2, 200), default=20, help="planner activation grid points")
    p.add_argument("--plan-weight-bins", type=whole_number(1, 50), default=5, help="planner trace-weight grid points")
    p.add_argument("--plan-select-users", type=whole_number(0, 1024), default=0,
                   help="simulated users on which the planner picks among its plans and fixed rules (0: none)")
    p.add_argument("--optimum-sims", type=whole_number(1, 65536), default=DEFAULT_SIMS,
                   help="simulated planner users per participant on their own schedule for the headline "
                        f"simulated time lost (its standard error falls as 1/sqrt; default {DEFAULT_SIMS})")
    p.add_argument("--duration-noise", choices=("lognormal", "gaussian"), default="lognormal",
                   help="duration likelihood of the operator-time fit")


def planner_options_of(args: argparse.Namespace) -> PlannerOptions:
    """The :class:`PlannerOptions` of :func:`add_planner_options`."""
    return PlannerOptions(args.plan_bins, args.plan_weight_bins, None, args.plan_select_users)


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``yardstick`` subcommand."""
    p = sub.add_parser("yardstick", help="each participant's choices against the planner in their own world")
    p.add_argument("log", type=input_file, help="trial log (.csv or .parquet)")
    add_common(p, models=False, fitting=False)  # the fits here take no --intervals or --start-range
    add_model_options(p, f"learning model to compare with planned_choice (default rescorla_wagner, when neither "
                         f"--model nor --model-file is given); {MODEL_HELP}")
    add_skip_bad(p)
    add_planner_options(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write the folder; print the per-participant table and the group figures."""
    learning = models_of(args, default=["rescorla_wagner"])
    if any(s.label == PLANNED for s in learning):
        raise CLIError(f"--model: {PLANNED!r} is the model every learning model is compared with; give learning "
                       "models only")
    claim_output(args.out, args)
    world = world_of(args)  # the base world: its costs, memory and schedule, with each participant's own times
    refuse_planner_world(world, "yardstick")
    log = read_log(args.log, world.commands, args.skip_bad_participants)
    report_skipped(log)
    people = _count(log["participant"].nunique(), "participant")
    detail(f"log {args.log}: {len(log)} trials of {people}; learning models "
           f"{[s.label for s in learning]}; output folder {args.out}")
    start = time.perf_counter()
    result = rationality_analysis(log, world, learning, planner_options_of(args), args.starts, args.seed, args.jobs,
                                  args.duration_noise, args.optimum_sims, progress=not args.quiet)
    entries, sections = write_rationality(result, args.out)
    sections.append(("Study world", world_words(world, args) + " Each participant's own world is this one with "
                                                               "their fitted operator times."))
    index = write_index(args.out, entries, "Yardstick: each participant against their own optimum", sections)
    cols = [c for c in HEADLINE_COLUMNS + ("better_model",) if c in result.participants.columns]
    print(result.participants[cols].to_string(index=False, float_format=lambda v: f"{v:.3g}"))
    print(result.group.to_string(index=False, float_format=lambda v: f"{v:.3g}"))
    status(f"report in {index.parent} ({time.perf_counter() - start:.1f} s)")
    return 0


def _count(n: int, noun: str) -> str:
    """'1 participant', '3 participants'."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"
