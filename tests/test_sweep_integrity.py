"""A sweep folder proves itself: damaged, missing or swapped runs are found and computed again,
one process at a time holds a folder, and a compatible resume keeps the manifest and spec current."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from shortcut_gym.envs.errors import ShortcutGymError
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.sweep.lock import FolderLock, SweepLockedError
from shortcut_gym.lab.sweep.run import COMPUTE_LOG_ENV
from shortcut_gym.lab.sweep.runner import run_sweep
from shortcut_gym.lab.sweep.spec import SweepSpecError
from shortcut_gym.lab.sweep.store import SweepStore, atomic_write_text, unique_suffix

SPEC: dict[str, Any] = {
    "name": "integrity_test",
    "base": {"schedule": {"sessions": 2, "trials_per_session": 6}},
    "vary": {"design": "grid", "parameters": {"costs.klm.keystroke_s": {"values": [0.1, 0.3, 0.9]}}},
    "agents": [{"name": "learn_first_k", "params": {"k": 1}}, {"name": "random"}],
    "seeds": {"first": 0, "count": 3},
    "outputs": {"plots": False},
}
N_RUNS = 6


@pytest.fixture(scope="module")
def finished(tmp_path_factory) -> tuple[Path, pd.DataFrame]:
    folder = tmp_path_factory.mktemp("ref") / "sweep"
    report = run_sweep(SPEC, folder, workers=1, progress=False)
    assert report.computed == N_RUNS
    return folder, pd.read_parquet(folder / "results.parquet")


def _copy(finished: tuple[Path, pd.DataFrame], dest: Path) -> Path:
    shutil.copytree(finished[0], dest)
    return dest


def _run_dirs(folder: Path) -> list[Path]:
    return sorted(p for p in (folder / "runs").iterdir() if p.is_dir())


def _truncate(path: Path) -> None:
    path.write_bytes(path.read_bytes()[: max(1, path.stat().st_size // 2)])


def _flip(path: Path) -> None:
    data = bytearray(path.read_bytes())
    data[len(data) // 2] ^= 0xFF
    path.write_bytes(bytes(data))


def _swap(a: Path, b: Path) -> None:
    tmp = a.with_name(a.name + ".swap")
    a.rename(tmp)
    b.rename(a)
    tmp.rename(b)


# Each corruption takes the run folders and damages one or two of them.
CORRUPTIONS = {
    "delete a table": lambda runs: (runs[1] / "blocks.parquet").unlink(),
    "delete meta.json": lambda runs: (runs[2] / "meta.json").unlink(),
    "truncate a table": lambda runs: _truncate(runs[0] / "commands.parquet"),
    "empty a table": lambda runs: (runs[3] / "blocks.parquet").write_bytes(b""),
    "flip a byte": lambda runs: _flip(runs[4] / "blocks.parquet"),
    "append bytes": lambda runs: (runs[5] / "meta.json").open("a").write(" "),
    "swap two run folders": lambda runs: _swap(runs[0], runs[3]),
    "swap one table between runs": lambda runs: _swap(runs[1] / "blocks.parquet", runs[2] / "blocks.parquet"),
    "delete a run folder": lambda runs: shutil.rmtree(runs[2]),
    "add a file to a run": lambda runs: (runs[1] / "notes.txt").write_text("mine"),
}


@pytest.mark.parametrize("name", list(CORRUPTIONS))
def test_each_corruption_is_found_by_audit_and_repaired_by_resume(name, finished, tmp_path, capsys) -> None:
    folder = _copy(finished, tmp_path / "sweep")
    CORRUPTIONS[name](_run_dirs(folder))
    assert main(["audit", str(folder)]) == 1
    out = capsys.readouterr().out
    assert "damaged" in out or "missing" in out, out
    report = run_sweep(SPEC, folder, workers=1, progress=False)
    assert 1 <= len(report.recomputed) <= 2 and report.computed == len(report.recomputed)
    pd.testing.assert_frame_equal(pd.read_parquet(folder / "results.parquet"), finished[1])
    assert main(["audit", str(folder)]) == 0
    if name != "delete a run folder":
        assert (folder / "damaged").is_dir()  # the damaged files are set aside, not deleted


def test_an_intact_folder_is_kept_whole_and_a_stray_folder_is_reported(finished, tmp_path, capsys) -> None:
    folder = _copy(finished, tmp_path / "sweep")
    assert main(["audit", str(folder)]) == 0
    (folder / "runs" / "r9999-deadbeef").mkdir()
    assert main(["audit", str(folder)]) == 1
    assert "stray runs/r9999-deadbeef" in capsys.readouterr().out
    report = run_sweep(SPEC, folder, workers=1, progress=False)
    assert report.computed == 0 and report.kept == N_RUNS
    assert any("r9999-deadbeef" in n for n in report.notes)


def test_a_damaged_manifest_is_a_clear_error(finished, tmp_path, capsys) -> None:
    folder = _copy(finished, tmp_path / "sweep")
    (folder / "manifest.json").write_text('{"runs": [')
    with pytest.raises(SweepSpecError, match="manifest.json: not a readable sweep manifest"):
        run_sweep(SPEC, folder, workers=1, progress=False)
    assert main(["audit", str(folder)]) == 2
    assert "not a readable sweep manifest" in capsys.readouterr().err
    manifest = json.loads((finished[0] / "manifest.json").read_text())
    (folder / "manifest.json").write_text(json.dumps({**manifest, "finished": ["r0000"]}))
    with pytest.raises(SweepSpecError, match="'finished' record is damaged"):
        run_sweep(SPEC, folder, workers=1, progress=False)


def test_a_run_finished_after_the_last_manifest_write_is_taken_in_not_recomputed(finished, tmp_path,
                                                                                 monkeypatch) -> None:
    folder = _copy(finished, tmp_path / "sweep")
    manifest = json.loads((folder / "manifest.json").read_text())
    dropped = sorted(manifest["finished"])[:2]
    for run_id in dropped:  # as if killed between the run's rename and the manifest's next write
        del manifest["finished"][run_id]
    (folder / "manifest.json").write_text(json.dumps(manifest))
    log = tmp_path / "computed.log"
    monkeypatch.setenv(COMPUTE_LOG_ENV, str(log))
    report = run_sweep(SPEC, folder, workers=1, progress=False)
    assert report.computed == 0 and not log.exists()
    assert set(json.loads((folder / "manifest.json").read_text())["finished"]) >= set(dropped)
    assert any("2 finished run(s) not yet in the manifest" in n for n in report.notes)


def test_a_compatible_resume_rewrites_spec_and_manifest(finished, tmp_path) -> None:
    folder = _copy(finished, tmp_path / "sweep")
    changed = {**SPEC, "description": "now with a description"}
    run_sweep(changed, folder, workers=1, progress=False)
    assert json.loads((folder / "spec.json").read_text())["description"] == "now with a description"
    manifest = json.loads((folder / "manifest.json").read_text())
    assert len(manifest["resumed"]) == 1 and manifest["status"] == {"done": N_RUNS, "failed": 0, "pending": 0}
    assert len(manifest["finished"]) == N_RUNS


_HOLD = """
import sys, time
from pathlib import Path
from shortcut_gym.lab.sweep.lock import FolderLock
lock = FolderLock(Path(sys.argv[1])).acquire()
print("held", flush=True)
time.sleep(120)
"""


def test_a_second_process_is_stopped_by_the_lock_naming_the_holder(finished, tmp_path, capsys) -> None:
    folder = _copy(finished, tmp_path / "sweep")
    holder = subprocess.Popen([sys.executable, "-c", _HOLD, str(folder)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        with pytest.raises(SweepLockedError, match=f"in use by pid {holder.pid} on host "):
            run_sweep(SPEC, folder, workers=1, progress=False)
        assert main(["sweep", str(tmp_path / "missing.yaml")]) == 2  # (the spec is checked first)
        capsys.readouterr()
        spec_path = tmp_path / "spec.json"
        spec_path.write_text(json.dumps(SPEC))
        assert main(["sweep", str(spec_path), "--out", str(folder), "--quiet"]) == 2
        err = capsys.readouterr().err
        assert f"pid {holder.pid}" in err and err.count("\n") == 1
        assert main(["audit", str(folder)]) == 0
        assert f"lock file names pid {holder.pid}" in capsys.readouterr().out
    finally:
        holder.kill()
        holder.wait()
    # the holder was killed without releasing: its record is stale, the next sweep takes over and says so
    report = run_sweep(SPEC, folder, workers=1, progress=False)
    assert any(f"took over the lock of pid {holder.pid}" in n and "no longer running" in n for n in report.notes)
    assert FolderLock(folder).read_holder() == {}  # released


def test_temporary_names_are_unique_per_process_and_call(tmp_path) -> None:
    names = {unique_suffix() for _ in range(200)}
    assert len(names) == 200 and all(n.startswith(f"{os.getpid()}.") for n in names)
    atomic_write_text(tmp_path / "a.txt", "x")
    assert [p.name for p in tmp_path.iterdir()] == ["a.txt"]


_OPS = st.lists(st.tuples(st.sampled_from(["delete", "truncate", "flip", "empty", "swap_dirs", "swap_files",
                                            "rmtree", "touch"]),
                          st.integers(0, N_RUNS - 1), st.integers(0, N_RUNS - 1),
                          st.sampled_from(["blocks.parquet", "commands.parquet", "meta.json"])),
                min_size=1, max_size=3)


def _apply(folder: Path, ops: list[tuple[str, int, int, str]]) -> None:
    for op, i, j, name in ops:
        runs = _run_dirs(folder)
        if not runs:
            return
        a, b = runs[i % len(runs)], runs[j % len(runs)]
        fa, fb = a / name, b / name
        if op == "delete" and fa.exists():
            fa.unlink()
        elif op == "truncate" and fa.exists():
            _truncate(fa)
        elif op == "flip" and fa.exists() and fa.stat().st_size:
            _flip(fa)
        elif op == "empty" and fa.exists():
            fa.write_bytes(b"")
        elif op == "swap_dirs" and a != b:
            _swap(a, b)
        elif op == "swap_files" and a != b and fa.exists() and fb.exists():
            _swap(fa, fb)
        elif op == "rmtree":
            shutil.rmtree(a)
        elif op == "touch":
            (a / f"extra-{name}").write_text("x")


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in (folder / "runs").rglob("*") if p.is_file()}


@settings(max_examples=30, suppress_health_check=[HealthCheck.function_scoped_fixture], deadline=None)
@given(ops=_OPS)
def test_random_corruption_is_always_detected_and_repaired(ops, finished, tmp_path) -> None:
    folder = tmp_path / f"sweep-{time.monotonic_ns()}"
    _copy(finished, folder)
    before = _snapshot(folder)
    _apply(folder, ops)
    check = SweepStore(folder).check()
    if _snapshot(folder) != before:
        assert not check.intact, ops  # any change to a finished run's files is seen
    try:
        report = run_sweep(SPEC, folder, workers=1, progress=False)
    except ShortcutGymError:
        return  # refused with a clear error: detected
    pd.testing.assert_frame_equal(pd.read_parquet(folder / "results.parquet"), finished[1])
    assert report.kept + report.computed == N_RUNS
    assert SweepStore(folder).check().intact
    shutil.rmtree(folder)
