"""``make demo``: the main job end to end on the bundled demo scenario (Tidepool Logbook)."""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from demo.design import aid_section, assignment_section
from demo.lab import lab_section
from demo.rationality import rationality_section
from demo.sweep import sweep_section
from demo.zoo import zoo_section
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.simulate import session_summary, simulate_agents


def baseline_section(out: Path, users: int) -> pd.DataFrame:
    """Fixed policies on the demo scenario: total time and hotkey use per session."""
    world = make_world()
    specs = [
        {"name": "always_menu"},
        {"name": "always_hotkey"},
        {"name": "learn_first_k", "params": {"k": 1}},
        {"name": "learn_first_k", "params": {"k": 3}},
    ]
    trials = simulate_agents(world, specs, range(users))
    summary = session_summary(trials)
    trials.to_parquet(out / "baseline_trials.parquet", index=False)
    summary.to_csv(out / "baseline_sessions.csv", index=False)
    print(f"== Fixed policies on '{world.scenario.name}' ({users} simulated users, {world.horizon} trials each)")
    wide = summary.pivot(index="session", columns="agent", values=["total_time_s", "hotkey_share"])
    print(wide.to_string(float_format=lambda v: f"{v:.2f}"))
    return summary


def main(argv: list[str] | None = None) -> int:
    """Run every demo section and print where the outputs went."""
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--out", type=Path, default=Path("out/demo"), help="output folder")
    parser.add_argument("--users", type=int, default=8, help="simulated users per agent")
    args = parser.parse_args(argv)
    args.out.mkdir(parents=True, exist_ok=True)
    baseline_section(args.out, args.users)
    zoo_section(args.out, args.users)
    lab_section(args.out, args.users)
    sweep_section(args.out)
    rationality_section(args.out)
    aid_section(args.out)
    assignment_section(args.out)
    print(f"\ndemo outputs in {args.out.resolve()}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
