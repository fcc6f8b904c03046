"""``shortcut-gym score``: agents against the dynamic-programming planner on the same simulated users
(time lost per user, adoption trial, hotkey share); trained models load with ``model_path=``."""

from __future__ import annotations

import argparse

from shortcut_gym.agents.planner.memory_model import PLANNER_MEMORY_REASON
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.agents.scoring import time_lost_vs_planner
from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import (
    add_agent_options,
    add_world_options,
    agent_specs_of,
    detail,
    refuse_planner_world,
    status,
    world_of,
)
from shortcut_gym.lab.cli.ranges import MAX_SEED, output_file, seed, whole_number
from shortcut_gym.lab.simulate import label_of

PLANNER = "bounded_optimal"
DESCRIPTION = (
    "Score agents against the dynamic-programming planner on the same simulated users: time lost per user "
    "(seconds), adoption trial, hotkey share. Columns ending in _se_s are standard errors over the users: "
    "time_lost_se_s is the sd of the per-user paired differences (the agent's total minus the planner's on "
    "the same seed) / sqrt(users), total_time_se_s the sd of the per-user totals / sqrt(users); with one "
    "user they are NaN. Worlds with pavlik_anderson memory are refused: "
    f"{PLANNER_MEMORY_REASON}.")


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``score`` subcommand."""
    p = sub.add_parser("score", help="score agents against the planner on the same simulated users",
                       description=DESCRIPTION)
    add_world_options(p, sessions=True)
    add_agent_options(p, "agent to score (repeatable; default: the baselines)")
    p.add_argument("--users", type=whole_number(1, 100_000), default=10,
                   help="simulated users per agent (at least 2 for the standard errors)")
    p.add_argument("--seed", type=seed, default=0, help="first seed; users get seed, seed+1, ...")
    p.add_argument("--out", type=output_file, default=None, help="also write the table as CSV")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Simulate the agents and the planner on the same seeds; print the table (time lost in seconds)."""
    if args.seed + args.users - 1 > MAX_SEED:
        raise CLIError(f"--seed {args.seed} with --users {args.users}: the last seed exceeds {MAX_SEED}")
    world = world_of(args)
    refuse_planner_world(world, "score")
    specs = agent_specs_of(args, default=["always_menu", "always_hotkey", "learn_first_k:k=1"])
    agents = {}
    for spec in specs:
        label = label_of(spec)
        if label in agents or label == PLANNER:
            raise CLIError(f"agent label {label!r} repeats (or is the planner's); give it a label: name=agent:...")
        agents[label] = agent_from_spec(spec)
    detail(f"{args.users} users per agent, seeds {args.seed}..{args.seed + args.users - 1}, against the planner; "
           f"output {args.out or 'none (the table only)'}")
    table = time_lost_vs_planner(world, agents, range(args.seed, args.seed + args.users), planner_label=PLANNER)
    print(table.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    if args.out is not None:
        args.out.parent.mkdir(parents=True, exist_ok=True)
        table.to_csv(args.out, index=False)
        status(f"wrote {args.out}")
    return 0
