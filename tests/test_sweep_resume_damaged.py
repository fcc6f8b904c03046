"""A sweep killed with SIGKILL, whose folder and plans are then damaged, resumes to the tables of an
uninterrupted sweep, and replans exactly the plans that were damaged.

The sweeps share a named plan folder that an uninterrupted sweep filled first, so plans of the
worlds the killed sweep never reached are on disk to be damaged (a sweep's own plans hold only the
worlds it has reached). The damage: one plan truncated, two plans swapped, one finished run's
result file deleted, stale locks (the killed sweep's folder lock, and a plan lock file holding
bytes that nobody holds)."""

from __future__ import annotations

import ast
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import pandas as pd

from shortcut_gym.agents.planner import cache, plan_store
from shortcut_gym.agents.planner.search import Plan
from shortcut_gym.lab.sweep.outputs import without_cost_columns
from shortcut_gym.lab.sweep.plan import plan_runs, world_from_settings
from shortcut_gym.lab.sweep.run import compute_run
from shortcut_gym.lab.sweep.spec import load_spec

PLANNER = "bounded_optimal"
SPEC = {"name": "resume_damaged_test", "base": {"schedule": {"sessions": 2, "trials_per_session": 8, "gap_h": 5.0}},
        # learning dear at the first points, cheap at the last: the planner learns hotkeys only late
        "vary": {"design": "grid", "parameters": {
            "costs.learn.encoding_s": {"values": [round(8.0 * (0.05 / 8.0) ** (i / 9), 4) for i in range(10)]}}},
        "agents": [{"name": PLANNER, "params": {"n_bins": 6, "n_weight_bins": 3}}, {"name": "always_menu"}],
        "seeds": {"first": 21, "count": 4}, "outputs": {"plots": False}}
N_RUNS = 20


def _metas(folder: Path) -> dict[str, tuple[int, int]]:
    """run id -> (inode, mtime_ns) of each finished run's meta file."""
    out = {}
    for p in (folder / "runs").iterdir() if (folder / "runs").is_dir() else []:
        meta = p / "meta.json"
        if p.is_dir() and not p.name.startswith(".tmp-") and meta.is_file():
            st = meta.stat()
            out[p.name] = (st.st_ino, st.st_mtime_ns)
    return out


def _output_tables(folder: Path) -> dict[str, pd.DataFrame]:
    """Every output table the sweep wrote at its top level, by file name."""
    tables = {p.name: pd.read_csv(p) for p in folder.glob("*.csv")}
    if "summary.csv" in tables:  # its timing and plan-count columns differ by computation (COST_COLUMNS)
        tables["summary.csv"] = without_cost_columns(tables["summary.csv"])
    tables.update({p.name: pd.read_parquet(p) for p in folder.glob("*.parquet")})
    return tables


def _entry_of_world(plans: Path) -> dict[str, tuple[Path, tuple]]:
    """world plan digest -> its plan entry in the folder and the entry's key (from each header line)."""
    out = {}
    for path in plan_store.entries(plans):
        key = ast.literal_eval(json.loads(path.read_bytes().partition(b"\n")[0])["key"])
        out[key[0]] = (path, key)
    return out


def _users_with_plan(run: dict[str, Any], key: tuple, plan: Plan | None, folder: Path) -> pd.DataFrame:
    """The users table of ``run`` computed with ``plan`` (None: its own) forged into a store as
    the plan of the run's world."""
    folder.mkdir()
    if plan is not None:
        plan_store.entry_path(folder, key).write_bytes(plan_store.encode(key, plan))
    cache.clear_plans()
    result = compute_run({**run, "plan_store": str(folder)})
    cache.clear_plans()
    return result["users"]


def test_a_killed_then_damaged_sweep_resumes_to_the_uninterrupted_tables_replanning_the_damaged(
        tmp_path: Path) -> None:
    spec_path = tmp_path / "spec.yaml"
    spec_path.write_text(json.dumps(SPEC))  # JSON is YAML
    plans = tmp_path / "plans"
    reference = tmp_path / "reference"
    # the reference runs in a fresh process, as the killed and the resumed sweeps do: plan files are
    # compared byte for byte, and a worker that ran other tests first holds caches of its own
    done = subprocess.run([sys.executable, "-m", "shortcut_gym", "sweep", str(spec_path), "--out", str(reference),
                           "--plan-folder", str(plans), "--quiet", "--workers", "1"],
                          capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr
    runs = plan_runs(load_spec(spec_path), str(spec_path))
    assert len(runs) == N_RUNS
    world_of = {r["run_id"]: world_from_settings(r["settings"]).plan_digest() for r in runs}
    planner_runs = [r["run_id"] for r in runs if r["agent"]["name"] == PLANNER]
    entry = _entry_of_world(plans)
    assert set(entry) == {world_of[r] for r in planner_runs}  # one plan per world
    whole = {p: p.read_bytes() for p, _ in entry.values()}

    folder = tmp_path / "sweep"
    cmd = [sys.executable, "-m", "shortcut_gym", "sweep", str(spec_path), "--out", str(folder),
           "--plan-folder", str(plans), "--workers", "1", "--quiet"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, start_new_session=True)
    deadline = time.time() + 120
    while len(_metas(folder)) < 4 and time.time() < deadline and proc.poll() is None:
        time.sleep(0.01)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL
    before = _metas(folder)
    unfinished = [r for r in planner_runs if r not in before]
    assert len(before) >= 4 and len(unfinished) >= 3, f"the kill came too late: {len(before)} runs finished"

    # the damage
    # swapped: the dearest world left and the cheapest; read as good, the dear world's plan would
    # change the cheap world's users (checked here on a forged store)
    chosen = [unfinished[-1], unfinished[0], unfinished[1]]
    (swap_a, key_a), (swap_b, key_b), (truncated, _) = (entry[world_of[r]] for r in chosen)
    run_a = next(r for r in runs if r["run_id"] == chosen[0])
    own = _users_with_plan(run_a, key_a, None, tmp_path / "own")
    forged = _users_with_plan(run_a, key_a, plan_store.decode(whole[swap_b], key_b), tmp_path / "forged")
    assert not own.equals(forged)
    swap_a.write_bytes(whole[swap_b])
    swap_b.write_bytes(whole[swap_a])
    truncated.write_bytes(whole[truncated][: len(whole[truncated]) // 2])
    damaged_worlds = {world_of[r] for r in chosen}
    deleted = next(r for r in planner_runs if r in before)  # a finished run loses a result file
    (folder / "runs" / deleted / "users.parquet").unlink()
    truncated.with_suffix(".lock").write_bytes(b"pid 4242 left this\n")  # a plan lock nobody holds
    assert (folder / ".lock").is_file()  # the killed sweep's own lock, left behind

    res = subprocess.run(cmd, capture_output=True, text=True, timeout=180)
    assert res.returncode == 0, res.stderr
    assert "took over the lock of pid" in res.stderr
    assert f"resuming {folder}: {len(before) - 1} of {N_RUNS} runs already finished" in res.stderr

    # table for table, the uninterrupted sweep's
    ours, theirs = _output_tables(folder), _output_tables(reference)
    assert set(ours) == set(theirs) and {"summary.csv", "results.parquet", "users.parquet"} <= set(ours)
    for name in theirs:
        pd.testing.assert_frame_equal(ours[name], theirs[name], check_exact=True, obj=name)

    # the run records: the damaged plans were made again, the others read, finished runs kept
    after = _metas(folder)
    assert set(after) == {r["run_id"] for r in runs}
    recomputed = {r for r in after if before.get(r) != after[r]}
    assert recomputed == {r for r in after if r not in before} | {deleted}
    records = {r: json.loads((folder / "runs" / r / "meta.json").read_text()) for r in recomputed}
    for run_id, meta in records.items():
        planned = run_id in planner_runs
        expected = ((1, 0) if world_of[run_id] in damaged_worlds else (0, 1)) if planned else (0, 0)
        assert (meta["plans_made"], meta["plans_loaded"]) == expected, run_id
    assert sum(m["plans_made"] for m in records.values()) == 3
    finish = [json.loads(line) for line in (folder / "log.jsonl").read_text().splitlines()][-1]
    assert finish["event"] == "finish" and finish["plans_made"] == 3
    # the plans are whole again, byte for byte, and the damaged ones set aside
    assert {p: p.read_bytes() for p, _ in entry.values()} == whole
    assert len(list(plans.glob("*.plan.damaged-*"))) == 3
