"""Demo section: a small sweep over typing skill and learning cost on Tidepool Logbook."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from shortcut_gym.lab.sweep.outputs import break_even_grid, fraction_agreeing
from shortcut_gym.lab.sweep.plan import plan_runs
from shortcut_gym.lab.sweep.runner import run_sweep
from shortcut_gym.lab.sweep.spec import load_spec

#: The bundled spec the demo runs (configs/sweeps/typing_vs_learning.yaml).
DEMO_SPEC = "typing_vs_learning"


def sweep_section(out: Path, workers: int | None = None) -> Path:
    """Run the demo sweep into ``out/sweep_typing_vs_learning`` (resumes if present); returns the folder."""
    spec = load_spec(DEMO_SPEC)
    folder = Path(out) / f"sweep_{spec.name}"
    print(f"\n== Sweep '{spec.name}': {spec.description}")
    report = run_sweep(spec, folder, workers=workers, progress=False)
    print("\n".join(report.lines()))
    summary = pd.read_csv(folder / "summary.csv")
    k, e = "costs.klm.keystroke_s", "costs.learn.encoding_s"
    table = summary.pivot_table(index=[k, e], columns="agent", values="time_saved_vs_menu_s")
    print("time saved over always-menu per simulated user (s), by keystroke time K and encoding time:")
    print(table.to_string(float_format=lambda v: f"{v:7.1f}"))
    grid = break_even_grid(spec, plan_runs(spec), pd.read_parquet(folder / "commands.parquet"))
    if grid is not None:
        share = fraction_agreeing(grid)
        print(f"break-even map for '{grid['command_name']}': simulated verdict of {grid['learner']} vs "
              f"{grid['menu']} agrees with the planner's analytic rule on {share:.0%} of the swept cells")
    return folder
