"""The break-even map's boundary agrees with the break-even rule on the swept grid."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents.planner import break_even_table
from shortcut_gym.envs import make_world
from shortcut_gym.lab.sweep.outputs import break_even_grid
from shortcut_gym.lab.sweep.plan import plan_runs
from shortcut_gym.lab.sweep.runner import run_sweep
from shortcut_gym.lab.sweep.spec import parse_spec

KS = [0.08, 0.2, 0.5, 1.2]
ENC = [0.5, 4.0, 32.0]
SCHEDULE = {"sessions": 4, "trials_per_session": 30}
SPEC: dict[str, Any] = {
    "name": "break_even_test",
    "base": {"schedule": SCHEDULE},
    "vary": {"design": "grid", "parameters": {
        "costs.klm.keystroke_s": {"values": KS}, "costs.learn.encoding_s": {"values": ENC}}},
    "agents": [{"name": "always_menu"}, {"name": "learn_first_k", "params": {"k": 1}}],
    "seeds": {"first": 0, "count": 8},
    "outputs": {"break_even": {"x": "costs.klm.keystroke_s", "y": "costs.learn.encoding_s", "command": 0}},
}


def test_break_even_map_boundary_matches_the_analytic_rule(tmp_path: Path) -> None:
    report = run_sweep(SPEC, tmp_path / "s", workers=2, progress=False)
    assert "break_even_plot" in report.outputs and report.outputs["break_even_plot"].stat().st_size > 1000
    spec = parse_spec(SPEC)
    grid = break_even_grid(spec, plan_runs(spec), pd.read_parquet(tmp_path / "s" / "commands.parquet"), refine=2)
    assert grid is not None
    # the analytic verdict on each swept cell is the planner's, computed here from a world built directly
    direct = np.array([[bool(break_even_table(make_world(
        costs={"klm": {"keystroke_s": k}, "learn": {"encoding_s": e}}, schedule=SCHEDULE)).iloc[0]["learning_pays"])
        for k in KS] for e in ENC])
    np.testing.assert_array_equal(grid["analytic_pays"], direct)
    assert 0 < direct.sum() < direct.size  # the boundary crosses the swept grid
    # the drawn boundary comes from the refined grid, which contains the swept cells at every other node
    assert grid["fine_x"][::2] == KS and grid["fine_y"][::2] == ENC
    np.testing.assert_array_equal(grid["fine_pays"][::2, ::2], direct)
    # simulation agrees with the rule far from the boundary: cheap learning for a fast typist pays,
    # expensive learning for the slowest typist does not
    sav = grid["simulated_saving_s"]
    assert sav[0, 0] > 0 and direct[0, 0]
    assert sav[-1, -1] < 0 and not direct[-1, -1]
    # the saving falls as learning gets dearer (same users, same trials: only the encoding time differs)
    assert (np.diff(sav, axis=0) < 0).all()
    # the folder's index.md states the agreement and tabulates the saving per swept cell
    index = (tmp_path / "s" / "index.md").read_text()
    share = float(((sav > 0) == direct).mean())
    assert f"on {share:.0%} of the swept cells" in index
    assert "![break-even map with the break-even rule's boundary](plots/break_even.png)" in index
    summary = pd.read_csv(tmp_path / "s" / "summary.csv")
    row = summary[(summary["agent"] == "learn_first_k(k=1)") & (summary["costs.klm.keystroke_s"] == 0.08)
                  & (summary["costs.learn.encoding_s"] == 0.5)]
    assert f"| 0.08 | 0.5 | 0.0 | {row['time_saved_vs_menu_s'].iloc[0]:.1f} |" in index
    # standard errors per cell from the kept per-user totals: sd / sqrt(users), paired against always-menu
    users = pd.read_parquet(tmp_path / "s" / "users.parquet")
    mine = users[users["run_index"] == row["run_index"].iloc[0]].set_index("seed")["total_time_s"]
    menu = users[(users["agent"] == "always_menu") & (users["point_index"] == row["point_index"].iloc[0])]
    menu = menu.set_index("seed")["total_time_s"]
    assert len(mine) == 8 and mine.mean() == pytest.approx(row["total_time_s"].iloc[0], rel=1e-9)
    assert row["total_time_se_s"].iloc[0] == pytest.approx(mine.std(ddof=1) / np.sqrt(8), rel=1e-9)
    assert (menu - mine).mean() == pytest.approx(row["time_saved_vs_menu_s"].iloc[0], rel=1e-9)
    assert row["time_saved_vs_menu_se_s"].iloc[0] == pytest.approx((menu - mine).std(ddof=1) / np.sqrt(8),
                                                                   rel=1e-9)
