"""Tutorial step 5: a sweep over two cost settings and its break-even map.

A sweep spec names a base setting, the parameters to vary (any dotted path into the scenario,
costs, memory or schedule settings), the agents and the seeds. Each run is written atomically
into the sweep folder, so a killed sweep resumes where it stopped.
Run: .venv/bin/python examples/tutorial_05_sweep.py [FOLDER]
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import pandas as pd

from shortcut_gym.lab.sweep.runner import run_sweep

SPEC = {
    "name": "tutorial_typing_vs_learning",
    "description": "Keystroke time K x encoding time of a learn trial, 3 daily sessions.",
    "base": {"scenario": "tidepool_logbook", "costs": "average_skilled_mouse",
             "schedule": {"sessions": 3, "trials_per_session": 40}},
    "vary": {"design": "grid", "parameters": {
        "costs.klm.keystroke_s": {"values": [0.08, 0.5, 1.2]},
        "costs.learn.encoding_s": {"values": [0.5, 8.0]},
    }},
    "agents": [{"name": "always_menu"}, {"name": "learn_first_k", "params": {"k": 1}},
               {"name": "bounded_optimal"}],
    "seeds": {"first": 0, "count": 4},
    "outputs": {"adoption_by": "costs.klm.keystroke_s",
                "break_even": {"x": "costs.klm.keystroke_s", "y": "costs.learn.encoding_s", "command": 0}},
}


def main(folder: Path | None = None) -> pd.DataFrame:
    with tempfile.TemporaryDirectory() as tmp:
        target = Path(folder) if folder is not None else Path(tmp) / "sweep"
        report = run_sweep(SPEC, target, workers=1, progress=False)
        print("\n".join(report.lines()))
        again = run_sweep(SPEC, target, workers=1, progress=False)  # nothing left to do: all kept
        print(f"second call kept {again.kept} of {again.total} runs and computed {again.computed}")
        summary = pd.read_csv(target / "summary.csv")
    k, e = "costs.klm.keystroke_s", "costs.learn.encoding_s"
    table = summary.pivot_table(index=[k, e], columns="agent", values="time_saved_vs_menu_s")
    print(table.to_string(float_format=lambda v: f"{v:7.1f}"))
    return summary


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else None)
