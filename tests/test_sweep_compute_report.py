"""The sweep's summary outputs report planning apart from simulation: summary.csv per run, and
index.md per agent and in all (plans made, plans read, planning and simulation wall and CPU
seconds), each figure equal to what the runs' own meta.json files record."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from shortcut_gym.agents.planner import cache
from shortcut_gym.lab.sweep.outputs import COST_COLUMNS, TIMING_COLUMNS
from shortcut_gym.lab.sweep.runner import run_sweep

SCHEDULE = {"sessions": 2, "trials_per_session": 8, "gap_h": 6.0}
PLANNER = {"name": "bounded_optimal", "params": {"n_bins": 6, "n_weight_bins": 3}}


def _spec() -> dict[str, Any]:
    agents = [{**PLANNER, "label": "planner_a"}, {**PLANNER, "label": "planner_b"}, {"name": "always_menu"}]
    return {"name": "compute_report_test", "base": {"schedule": SCHEDULE},
            "vary": {"design": "grid", "parameters": {"memory.threshold": {"values": [-3.0, -2.0, -1.5]}}},
            "agents": agents, "seeds": {"first": 11, "count": 3}, "outputs": {"plots": False}}


def _metas(folder: Path) -> dict[str, dict[str, Any]]:
    return {p.parent.name: json.loads(p.read_text()) for p in (folder / "runs").glob("*/meta.json")}


def _expected(meta: dict[str, Any]) -> dict[str, float]:
    """A run's figures from its meta.json: simulation is what is left of compute after the plan and the wait."""
    return {"compute_s": meta["compute_s"], "plan_s": meta["plan_s"], "plan_wait_s": meta["plan_wait_s"],
            "simulation_s": meta["compute_s"] - meta["plan_s"] - meta["plan_wait_s"],
            "compute_cpu_s": meta["compute_cpu_s"], "plan_cpu_s": meta["plan_cpu_s"],
            "simulation_cpu_s": meta["compute_cpu_s"] - meta["plan_cpu_s"],
            "plans_made": meta["plans_made"], "plans_loaded": meta["plans_loaded"]}


def _table_rows(index_md: str, heading: str) -> dict[str, list[str]]:
    """First cell -> the other cells of the pipe table under ``heading``."""
    lines = index_md.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("#") and heading in line)
    rows: dict[str, list[str]] = {}
    for line in lines[start + 1:]:
        if line.startswith("#"):
            break
        if line.startswith("| "):
            cells = [c.strip() for c in line.strip().strip("|").split("|")]
            rows[cells[0]] = cells[1:]
    return rows


@pytest.mark.parametrize("workers", [1, 2])
def test_summary_and_index_report_plan_and_simulation_time_as_the_runs_record(tmp_path: Path, workers: int) -> None:
    folder = tmp_path / "sweep"
    cache.clear_plans()  # a one-worker sweep plans in this process: start with no plans in memory
    report = run_sweep(_spec(), folder, workers=workers)
    metas = _metas(folder)
    summary = pd.read_csv(folder / "summary.csv")
    assert len(summary) == len(metas) == 9
    assert set(COST_COLUMNS) <= set(summary.columns) and set(TIMING_COLUMNS) < set(COST_COLUMNS)
    for _, row in summary.iterrows():
        for col, value in _expected(metas[row["run_id"]]).items():
            assert row[col] == pytest.approx(value, rel=1e-12, abs=1e-12), (row["run_id"], col)
    # one plan per world in all: three worlds, two planner labels sharing each plan
    assert summary["plans_made"].sum() + summary["plans_loaded"].sum() >= 3
    assert summary["plans_made"].sum() == report.plans_made == 3
    assert (summary.loc[summary["agent"] == "always_menu", ["plan_s", "plans_made", "plans_loaded"]] == 0).all().all()

    index = (folder / "index.md").read_text()
    rows = _table_rows(index, "Computing time")
    frame = pd.DataFrame([_expected(m) | {"agent": next(r for r in summary.itertuples() if r.run_id == i).agent}
                          for i, m in metas.items()])
    groups = {**{a: g for a, g in frame.groupby("agent")}, "all runs": frame}
    assert set(rows) == {"agent", *groups}
    header = rows["agent"]
    for name, g in groups.items():
        cells = dict(zip(header, rows[name], strict=True))
        assert int(cells["runs"]) == len(g)
        assert int(cells["plans made"]) == g["plans_made"].sum()
        assert int(cells["plans read"]) == g["plans_loaded"].sum()
        for label, col in (("planning wall s", "plan_s"), ("planning CPU s", "plan_cpu_s"),
                           ("waiting s", "plan_wait_s"), ("simulation wall s", "simulation_s"),
                           ("simulation CPU s", "simulation_cpu_s")):
            assert cells[label] == f"{g[col].sum():.3f}", (name, label)
    assert "summary.csv" in index

