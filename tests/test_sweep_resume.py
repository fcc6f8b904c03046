"""A sweep process killed with SIGKILL part-way and restarted finishes every run exactly once."""

from __future__ import annotations

import collections
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import yaml

from shortcut_gym.lab.sweep.run import COMPUTE_LOG_ENV

SPEC = {
    "name": "resume_test",
    "base": {"schedule": {"sessions": 4, "trials_per_session": 25}},
    "vary": {"design": "grid", "parameters": {
        "costs.klm.keystroke_s": {"low": 0.08, "high": 1.2, "steps": 6},
        "costs.learn.encoding_s": {"values": [1.0, 4.0, 16.0]},
    }},
    "agents": [{"name": "learn_first_k", "params": {"k": 1}}, {"name": "random"}],
    "seeds": {"first": 0, "count": 12},
    "outputs": {"plots": False},
}
N_RUNS = 36


def _finished(runs_dir: Path) -> dict[str, tuple[int, int]]:
    """run id -> (inode, mtime_ns) of each finished run's meta file."""
    out = {}
    for p in runs_dir.iterdir() if runs_dir.is_dir() else []:
        meta = p / "meta.json"
        if p.is_dir() and not p.name.startswith(".tmp-") and meta.is_file():
            st = meta.stat()
            out[p.name] = (st.st_ino, st.st_mtime_ns)
    return out


def test_killed_sweep_resumes_without_redoing_or_losing_runs(tmp_path: Path) -> None:
    spec_path = tmp_path / "spec.yaml"
    spec_path.write_text(yaml.safe_dump(SPEC))
    folder = tmp_path / "sweep"
    log = tmp_path / "computed.log"
    env = {**os.environ, COMPUTE_LOG_ENV: str(log)}
    cmd = [sys.executable, "-m", "shortcut_gym", "sweep", str(spec_path), "--out", str(folder),
           "--workers", "1", "--quiet"]
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True)
    deadline = time.time() + 90
    while len(_finished(folder / "runs")) < 5 and time.time() < deadline and proc.poll() is None:
        time.sleep(0.02)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    before = _finished(folder / "runs")
    assert 5 <= len(before) < N_RUNS, f"kill came too late or too early: {len(before)} runs finished"

    res = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=180)
    assert res.returncode == 0, res.stderr
    assert f"resuming {folder}: {len(before)} of {N_RUNS} runs already finished" in res.stderr
    after = _finished(folder / "runs")
    assert len(after) == N_RUNS
    for run_id, stamp in before.items():  # finished runs were kept untouched
        assert after[run_id] == stamp, run_id
    counts = collections.Counter(log.read_text().split())
    assert all(counts[run_id] == 1 for run_id in before), "a finished run was computed again"
    assert set(counts) == set(after)
    assert not [p for p in (folder / "runs").iterdir() if p.name.startswith(".tmp-")]
    results = pd.read_parquet(folder / "results.parquet")
    per_run = results.groupby("run_id")["session"].count()
    assert len(per_run) == N_RUNS and (per_run == 4).all()  # each run exactly once, all sessions
    assert results["run_index"].is_monotonic_increasing
