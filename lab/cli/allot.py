"""``shortcut-gym allot``: choose which commands get the free key combinations (hotkey budget)."""

from __future__ import annotations

import argparse

from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import (
    add_agent_options,
    add_world_options,
    agent_specs_of,
    refuse_planner_agents,
    refuse_planner_world,
    spec_names,
    status,
    world_of,
)
from shortcut_gym.lab.cli.ranges import output_folder, seed, whole_number
from shortcut_gym.lab.design.assignment import (
    budget_curve,
    combo_pool,
    combos_from_labels,
    planner_savings,
    population_savings,
    solve_exact,
    solve_greedy,
)
from shortcut_gym.lab.design.plots import budget_figure, save_figure


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``allot`` subcommand."""
    p = sub.add_parser("allot", help="assign a budget of hotkeys to the commands that save the most time")
    add_world_options(p, sessions=True)
    p.add_argument("--budget", type=whole_number(0), required=True,
                   help="hotkeys to hand out (the curve runs 0..budget)")
    p.add_argument("--keys", default=None,
                   help="comma-separated free combinations, e.g. 'J,/,Ctrl+K,Ctrl+Shift+K' (the comma key itself "
                        "cannot be listed here)")
    p.add_argument("--pool", default="4,8,8",
                   help="generated pool instead of --keys: SINGLE,ONE_MODIFIER,TWO_MODIFIER counts (default 4,8,8)")
    p.add_argument("--keyboard-share", type=float, default=0.0,
                   help="share of trials the hand starts on the keyboard (fixed, so commands separate; default 0)")
    add_agent_options(p, "price savings by simulating this population instead of the planner: agent "
                         "(repeatable, e.g. fitted learning models)")
    p.add_argument("--users", type=whole_number(1), default=20, help="simulated users per agent with --agent")
    p.add_argument("--seed", type=seed, default=0, help="first user seed with --agent")
    p.add_argument("--bins", type=whole_number(2), default=40, help="activation grid points of the planner")
    p.add_argument("--out", type=output_folder, default=None,
                   help="folder for savings.csv, assignment.csv, budget.csv and budget.png")
    p.set_defaults(func=run)


def _pool(args: argparse.Namespace) -> list:
    if args.keys is not None:
        try:
            return combos_from_labels([k.strip() for k in args.keys.split(",") if k.strip()])
        except ValueError as err:  # the labels' faults are all about the text given
            raise CLIError(f"--keys {err}") from None
    parts = args.pool.split(",")
    if len(parts) != 3 or not all(p.strip().isdigit() for p in parts):
        raise CLIError(f"--pool must be three whole numbers SINGLE,ONE_MODIFIER,TWO_MODIFIER, got {args.pool!r}")
    return combo_pool(*(int(p) for p in parts))


def run(args: argparse.Namespace) -> int:
    """Price every command by the planner, solve for each budget, print and optionally write."""
    pool = _pool(args)
    world = world_of(args)
    most = min(len(pool), world.commands.n_commands)
    if args.budget > most:
        raise CLIError(f"--budget {args.budget} is more than can be handed out: {world.commands.n_commands} "
                          f"commands, {len(pool)} free combinations (at most {most})")
    counts = {c.keystrokes for c in pool}
    specs = agent_specs_of(args)
    if specs:
        refuse_planner_agents(world, "allot", "--agent", spec_names(specs))
    else:
        refuse_planner_world(world, "allot (it prices every command by the planner; --agent prices by simulation)")
    if specs:
        table = population_savings(world, specs, counts, range(args.seed, args.seed + args.users), where="allot")
    else:
        table = planner_savings(world, counts, args.keyboard_share, n_bins=args.bins)
    S = table.for_combos(pool)
    exact, heuristic = solve_exact(S, args.budget), solve_greedy(S, args.budget)
    chosen = exact.frame(table, pool)
    curve = budget_curve(table, pool, range(args.budget + 1))
    print(f"{world.scenario.name}: {len(pool)} free combinations, budget {args.budget}, saving per user over "
          f"{world.horizon} trials ({table.source})")
    print(chosen.to_string(index=False, float_format=lambda v: f"{v:.3f}") if len(chosen) else "no hotkey pays")
    print(f"exact {exact.saving_s:.2f} s per user; heuristic {heuristic.saving_s:.2f} s")
    print(curve.drop(columns="commands").to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    if args.out is not None:
        args.out.mkdir(parents=True, exist_ok=True)
        table.frame().to_csv(args.out / "savings.csv", index=False)
        chosen.to_csv(args.out / "assignment.csv", index=False)
        curve.to_csv(args.out / "budget.csv", index=False)
        save_figure(budget_figure(curve, f"{world.scenario.name}: hotkey budget"), args.out / "budget.png")
        status(f"wrote savings.csv, assignment.csv, budget.csv and budget.png to {args.out}")
    return 0
