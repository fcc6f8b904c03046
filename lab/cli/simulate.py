"""``shortcut-gym simulate``: run agents on a scenario and print per-session figures."""

from __future__ import annotations

import argparse
from pathlib import Path

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import add_agent_options, add_world_options, agent_specs_of, world_of
from shortcut_gym.lab.cli.ranges import MAX_SEED, output_file, output_folder, seed, whole_number
from shortcut_gym.lab.data.logs import log_format, log_from_simulation, write_log
from shortcut_gym.lab.simulate import session_summary, simulate_agents

#: Most simulated users per agent one ``simulate`` call runs (the trial table is held in memory).
MAX_USERS = 100_000


def _log_path(text: str) -> Path:
    path = output_file(text)
    try:
        log_format(path)
    except ConfigError as err:
        raise argparse.ArgumentTypeError(str(err)) from None
    return path


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``simulate`` subcommand."""
    p = sub.add_parser("simulate", help="simulate agents on a scenario and summarise per session")
    add_world_options(p, sessions=True)
    add_agent_options(p, "agent (repeatable; default: the baselines)")
    p.add_argument("--users", type=whole_number(1, MAX_USERS), default=5, help="simulated users per agent")
    p.add_argument("--seed", type=seed, default=0, help="first seed; users get seed, seed+1, ...")
    p.add_argument("--out", type=output_folder, default=None, help="folder for trials.parquet and summary.csv")
    p.add_argument("--log", type=_log_path, default=None,
                   help="also write the trials as a trial log (.csv or .parquet) that 'fit' reads; "
                        "participants are named <agent>-u<seed>")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Simulate, print the session table, optionally write the outputs."""
    if args.seed + args.users - 1 > MAX_SEED:
        raise CLIError(f"--seed {args.seed} with --users {args.users}: the last seed exceeds {MAX_SEED}")
    world = world_of(args)
    specs = agent_specs_of(args, default=["always_menu", "always_hotkey", "learn_first_k:k=1"])
    trials = simulate_agents(world, specs, range(args.seed, args.seed + args.users))
    summary = session_summary(trials)
    print(summary.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    if args.out is not None:
        args.out.mkdir(parents=True, exist_ok=True)
        trials.to_parquet(args.out / "trials.parquet", index=False)
        summary.to_csv(args.out / "summary.csv", index=False)
        print(f"wrote {args.out / 'trials.parquet'} and {args.out / 'summary.csv'}")
    if args.log is not None:
        keyed = trials.assign(participant_key=[f"{a}-u{u}" for a, u in zip(trials["agent"], trials["user"])])
        log = log_from_simulation(keyed, world.commands, participant_column="participant_key", prefix="")
        print(f"wrote trial log {write_log(log, args.log)} ({log['participant'].nunique()} participants)")
    return 0
