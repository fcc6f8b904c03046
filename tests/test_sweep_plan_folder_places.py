"""A plan folder inside any sweep's results (the sweep folder itself or under its runs/, this
sweep's or another's) is refused naming both; audit reports files in runs/ that belong to no run."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from shortcut_gym.agents.planner import cache
from shortcut_gym.lab.cli import main

SPEC = {"name": "plan_places", "base": {"schedule": {"sessions": 2, "trials_per_session": 6, "gap_h": 5.0}},
        "vary": {"design": "grid", "parameters": {"memory.threshold": {"values": [-3.0, -2.2]}}},
        "agents": [{"name": "bounded_optimal", "params": {"n_bins": 6, "n_weight_bins": 3}}, {"name": "always_menu"}],
        "seeds": {"first": 4, "count": 2}, "outputs": {"plots": False}}


def _sweep(tmp_path: Path, out: Path, *extra: str) -> int:
    spec = tmp_path / "spec.yaml"
    spec.write_text(json.dumps(SPEC))  # JSON is YAML
    cache.clear_plans()
    return main(["sweep", str(spec), "--out", str(out), "--quiet", "--workers", "1", *extra])


@pytest.fixture
def other_sweep(tmp_path: Path) -> Path:
    folder = tmp_path / "first"
    assert _sweep(tmp_path, folder) == 0
    return folder


@pytest.mark.parametrize("inside", ["runs", "runs/deeper/still", "", "runs/r0000"])
def test_a_plan_folder_inside_another_sweeps_results_is_refused_naming_both(tmp_path: Path, other_sweep: Path,
                                                                            capsys, inside: str) -> None:
    before = sorted(p.relative_to(other_sweep) for p in other_sweep.rglob("*"))
    plans = other_sweep / inside if inside else other_sweep
    out = tmp_path / "second"
    assert _sweep(tmp_path, out, "--plan-folder", str(plans)) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and str(plans.resolve()) in err and str(other_sweep.resolve()) in err, err
    assert not out.exists()
    assert sorted(p.relative_to(other_sweep) for p in other_sweep.rglob("*")) == before  # nothing written there


def test_a_plan_folder_beside_a_sweeps_results_is_allowed(tmp_path: Path, other_sweep: Path) -> None:
    shared = other_sweep / "shared_plans"  # inside the sweep folder but not its results
    assert _sweep(tmp_path, tmp_path / "second", "--plan-folder", str(shared)) == 0
    assert len(list(shared.glob("*.plan"))) == 2
    assert main(["audit", str(other_sweep)]) == 0


def test_audit_reports_files_in_runs_that_belong_to_no_run(tmp_path: Path, other_sweep: Path, capsys) -> None:
    assert main(["audit", str(other_sweep)]) == 0
    capsys.readouterr()
    runs = other_sweep / "runs"
    loose = ["0123.plan", "notes.txt", "r9999-0000.failed.json"]  # the last names no run of the plan
    for name in loose:
        (runs / name).write_text("x")
    assert main(["audit", str(other_sweep)]) == 1
    out = capsys.readouterr().out
    assert "3 loose file(s)" in out
    for name in loose:
        assert f"loose runs/{name}" in out, out
    for name in loose:
        (runs / name).unlink()
    assert main(["audit", str(other_sweep)]) == 0
