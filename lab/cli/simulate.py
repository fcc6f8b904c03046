"""``shortcut-gym simulate``: run agents on a scenario and print per-session figures."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np
import pandas as pd

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.checks.population import read_population
from shortcut_gym.lab.checks.recovery import simulate_known
from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import (
    add_agent_options,
    add_overwrite,
    add_world_options,
    agent_specs_of,
    claim_output,
    counted,
    detail,
    refuse_planner_agents,
    spec_names,
    status,
    world_of,
)
from shortcut_gym.lab.cli.ranges import MAX_SEED, input_file, output_file, output_folder, seed, whole_number
from shortcut_gym.lab.data.logs import log_format, log_from_simulation, validate_log, write_log
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
    p.add_argument("--population", type=input_file, default=None,
                   help="population spec (YAML: per model, a distribution per parameter and a participant count): "
                        "simulate each model's participants with drawn parameters into --log, and write their "
                        "true parameters beside it (<log>_truth.csv); --agent and --users do not apply")
    add_overwrite(p)
    p.set_defaults(func=run)


def _truth_path(log: Path) -> Path:
    return log.with_name(f"{log.stem}_truth.csv")


def run_population(args: argparse.Namespace) -> int:
    """Simulate a population spec into a log and its truth file."""
    if args.log is None:
        raise CLIError("--population needs --log (the trial log to write; the truth file goes beside it)")
    if args.agent is not None:
        raise CLIError("--population draws its own models: give no --agent")
    claim_output(args.log, args, "--log")
    claim_output(_truth_path(args.log), args, "--log (its truth file)")
    try:
        populations = read_population(args.population)
    except ConfigError as err:
        raise CLIError(str(err)) from None
    world = world_of(args)
    refuse_planner_agents(world, "simulate", "--population", [(p.spec.label, p.spec.name) for p in populations])
    detail(f"population {args.population}: {sum(p.participants for p in populations)} participants from seed "
           f"{args.seed}; trial log {args.log}")
    rng = np.random.default_rng(args.seed)
    logs, truths = [], []
    for pop in populations:
        log, truth = simulate_known(world, pop.spec, pop.participants, rng, prefix=f"{pop.spec.label}-",
                                    population=pop)
        truth.insert(1, "model", pop.spec.label)
        truth.insert(2, "agent", pop.spec.name)
        truth.insert(3, "options", json.dumps(dict(pop.spec.options), sort_keys=True))
        logs.append(log)
        truths.append(truth)
    log = validate_log(pd.concat(logs, ignore_index=True), world.commands, source="simulated population")
    truth = pd.concat(truths, ignore_index=True)
    status(f"wrote trial log {write_log(log, args.log)} ({counted(log['participant'].nunique(), 'participant')})")
    truth.to_csv(_truth_path(args.log), index=False)
    status(f"wrote true parameters {_truth_path(args.log)}")
    for pop in populations:
        for name, how in pop.describe().items():
            print(f"  {pop.spec.label}.{name}: {how}")
    return 0


def run(args: argparse.Namespace) -> int:
    """Simulate, print the session table, optionally write the outputs."""
    if args.population is not None:
        return run_population(args)
    claim_output(args.out, args)
    claim_output(args.log, args, "--log")
    if args.seed + args.users - 1 > MAX_SEED:
        raise CLIError(f"--seed {args.seed} with --users {args.users}: the last seed exceeds {MAX_SEED}")
    world = world_of(args)
    specs = agent_specs_of(args, default=["always_menu", "always_hotkey", "learn_first_k:k=1"])
    refuse_planner_agents(world, "simulate", "--agent", spec_names(specs))
    detail(f"{args.users} users per agent, seeds {args.seed}..{args.seed + args.users - 1}; outputs: "
           + (", ".join(f"{name} {path}" for name, path in (("folder", args.out), ("trial log", args.log))
                        if path is not None) or "none (the table only)"))
    trials = simulate_agents(world, specs, range(args.seed, args.seed + args.users))
    summary = session_summary(trials)
    print(summary.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    if args.out is not None:
        args.out.mkdir(parents=True, exist_ok=True)
        trials.to_parquet(args.out / "trials.parquet", index=False)
        summary.to_csv(args.out / "summary.csv", index=False)
        status(f"wrote {args.out / 'trials.parquet'} and {args.out / 'summary.csv'}")
    if args.log is not None:
        keyed = trials.assign(participant_key=[f"{a}-u{u}" for a, u in zip(trials["agent"], trials["user"])])
        log = log_from_simulation(keyed, world.commands, participant_column="participant_key", prefix="")
        status(f"wrote trial log {write_log(log, args.log)} ({counted(log['participant'].nunique(), 'participant')})")
    return 0
