"""``shortcut-gym aids``: rank interface aids by the time they save per user, for each population."""

from __future__ import annotations

import argparse

from shortcut_gym.lab.cli.options import detail, parse_agent_arg, status
from shortcut_gym.lab.cli.ranges import output_folder, whole_number
from shortcut_gym.lab.design.aid_study import StudyAgent, load_study, parse_study, run_study
from shortcut_gym.lab.design.plots import aid_figure, save_figure
from shortcut_gym.lab.sweep.spec import SeedBlock


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``aids`` subcommand."""
    p = sub.add_parser("aids", help="rank interface aids (key labels, nudges, menu delay, lockout, warm-up) by "
                                    "time saved per user, for each value of a population setting")
    p.add_argument("study", help="aid study YAML (or the name of a bundled one in configs/studies)")
    p.add_argument("--users", type=whole_number(1), default=None,
                   help="simulated users instead of the study's count (same first seed)")
    p.add_argument("--agent", action="append", default=None,
                   help="simulated users' agent instead of the study's, as [label=]name[:key=value,...] (repeatable)")
    p.add_argument("--threads", type=whole_number(1, 64), default=None,
                   help="worker threads instead of the study's (the compiled loops release the GIL)")
    p.add_argument("--out", type=output_folder, default=None, help="folder for ranking.csv and aids.png")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Run the study, print the ranking per population value and agent, optionally write it."""
    spec, aids = load_study(args.study)
    if args.agent:
        agents = [StudyAgent(**parse_agent_arg(a)) for a in args.agent]
        spec, aids = parse_study({**spec.model_dump(exclude_none=True), "agents": [a.model_dump() for a in agents]},
                                 f"{args.study} with --agent")
    if args.users is not None:
        spec = spec.model_copy(update={"users": SeedBlock(first=spec.users.first, count=args.users)})
    detail(f"study {spec.name}: {len(aids)} aids, {spec.users.count} users from seed {spec.users.first}, agents "
           f"{[a.label or a.name for a in spec.agents]}; output folder {args.out or 'none (the table only)'}")
    table = run_study(spec, aids, threads=args.threads)
    path = spec.population.path
    print(f"{spec.name}: {len(aids)} aids x {len(spec.population.values)} values of {path} x "
          f"{len(spec.agents)} agents; seconds saved per user over the horizon (aid costs included)")
    cols = [path, "agent", "rank", "aid", "saved_s", "saved_se_s", "pays_share", "first_hotkey_session",
            "first_session_hotkey_share", "base_first_session_hotkey_share"]
    print(table[cols].to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    if args.out is not None:
        args.out.mkdir(parents=True, exist_ok=True)
        table.to_csv(args.out / "ranking.csv", index=False)
        save_figure(aid_figure(table, path, f"{spec.name}: time saved per user by each aid"), args.out / "aids.png")
        status(f"wrote ranking.csv and aids.png to {args.out}")
    return 0
