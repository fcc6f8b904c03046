"""The plan store's pruning: a sweep removes its own plans when it finishes (unless kept), a byte
cap removes the least recently used entries, and a resumed sweep replans what is gone (damaged,
removed or replaced by a file) with tables identical to an uninterrupted sweep.

The resume is made by removing finished runs' folders, which a restart computes again exactly as
it computes the runs a killed sweep never finished (tests/test_sweep_resume.py kills for real)."""

from __future__ import annotations

import os
import shutil
import time
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from shortcut_gym.agents.planner import cache, plan_store
from shortcut_gym.lab.sweep.outputs import without_cost_columns
from shortcut_gym.lab.sweep.runner import run_sweep

SCHEDULE = {"sessions": 2, "trials_per_session": 8, "gap_h": 5.0}
THRESHOLDS = [-3.2, -2.8, -2.4, -2.0]


def _spec() -> dict[str, Any]:
    agents = [{"name": "bounded_optimal", "params": {"n_bins": 6, "n_weight_bins": 3}}, {"name": "always_menu"}]
    return {"name": "plan_prune_test", "base": {"schedule": SCHEDULE},
            "vary": {"design": "grid", "parameters": {"memory.threshold": {"values": THRESHOLDS}}},
            "agents": agents, "seeds": {"first": 11, "count": 3}, "outputs": {"plots": False}}


def _tables(folder: Path) -> list[pd.DataFrame]:
    return [pd.read_parquet(folder / "results.parquet"), pd.read_parquet(folder / "commands.parquet"),
            pd.read_parquet(folder / "users.parquet"), without_cost_columns(pd.read_csv(folder / "summary.csv"))]


def _same_tables(a: Path, b: Path) -> None:
    for x, y in zip(_tables(a), _tables(b), strict=True):
        pd.testing.assert_frame_equal(x, y, check_exact=True)


def _sweep(folder: Path, **kw: Any):  # noqa: ANN202 - SweepReport
    cache.clear_plans()  # in-process runs would otherwise find the plans in memory
    report = run_sweep(_spec(), folder, workers=kw.pop("workers", 1), progress=False, **kw)
    assert not report.failed
    return report


@pytest.fixture(scope="module")
def reference(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One uninterrupted sweep with no plans on disk."""
    folder = tmp_path_factory.mktemp("ref") / "s"
    _sweep(folder, plan_store=False)
    return folder


def _drop_planner_runs(folder: Path, n: int) -> None:
    """Remove n finished planner runs (each of its own world), as if the sweep had not reached them."""
    users = pd.read_parquet(folder / "users.parquet")
    ids = sorted(users.loc[users["agent"].str.contains("bounded"), "run_id"].unique())
    assert len(ids) == len(THRESHOLDS)
    for run_id in ids[:n]:
        shutil.rmtree(folder / "runs" / run_id)


def test_a_finished_sweep_removes_its_plans_and_a_resume_replans_what_it_needs(tmp_path: Path, reference: Path) -> None:
    folder = tmp_path / "s"
    first = _sweep(folder)
    assert not (folder / "plans").exists() and first.plans_made == len(THRESHOLDS)
    assert first.plans_removed_bytes is not None and first.plans_removed_bytes > 0
    assert any("removed the sweep's plans" in line for line in first.lines())
    _same_tables(reference, folder)
    _drop_planner_runs(folder, 2)
    again = _sweep(folder)
    assert again.computed == 2 and again.plans_made == 2 and again.plans_loaded == 0
    assert not (folder / "plans").exists()
    _same_tables(reference, folder)


DAMAGE = {
    "kept": lambda plans: None,
    "folder removed": lambda plans: shutil.rmtree(plans),
    "entries truncated": lambda plans: [p.write_bytes(p.read_bytes()[:100]) for p in plans.glob("*.plan")],
    "entries emptied and locks removed": lambda plans: [
        (p.write_bytes(b""), p.with_suffix(".lock").unlink(missing_ok=True)) for p in plans.glob("*.plan")],
    "folder replaced by a file": lambda plans: (shutil.rmtree(plans), plans.write_text("not a plan folder")),
}


@pytest.mark.parametrize(("damage", "workers"), [(d, 1) for d in DAMAGE] + [("kept", 2), ("entries truncated", 2)])
def test_a_resume_after_the_kept_plans_are_damaged_or_removed_gives_the_same_tables(tmp_path: Path, reference: Path,
                                                                                  damage: str, workers: int) -> None:
    folder = tmp_path / "s"
    first = _sweep(folder, keep_plans=True, workers=workers)
    assert first.plans_removed_bytes is None
    assert len(plan_store.entries(folder / "plans")) == len(THRESHOLDS)
    _drop_planner_runs(folder, 3)
    DAMAGE[damage](folder / "plans")
    again = _sweep(folder, keep_plans=True, workers=workers)
    assert again.computed == 3
    reusable = damage == "kept"
    assert (again.plans_made, again.plans_loaded) == ((0, 3) if reusable else (3, 0))
    gone = damage in ("folder removed", "folder replaced by a file")  # only the 3 replanned entries are there
    assert len(plan_store.entries(folder / "plans")) == (3 if gone else len(THRESHOLDS))
    if damage == "folder replaced by a file":
        assert len(list((folder / "damaged").glob("plans.*"))) == 1
        assert any("was a file, not the plan folder" in n for n in again.notes)
    _same_tables(reference, folder)


def _age(paths: list[Path]) -> None:
    """Give the entries distinct last-use times in list order (oldest first), a second apart."""
    now = time.time()
    for i, p in enumerate(paths):
        os.utime(p, (now - 100 + i, now - 100 + i))


def test_prune_removes_least_recently_used_entries_down_to_the_cap(tmp_path: Path) -> None:
    sizes = [300, 500, 200, 400, 100]
    paths = [tmp_path / f"{i:064x}.plan" for i in range(len(sizes))]
    aside = tmp_path / f"{9:064x}.plan.damaged-1"  # set aside: counted, and the first to go when over the cap
    order = [paths[i] for i in (3, 0, 4, 1, 2)]  # last use: 3 oldest, then 0, 4, 1, 2 newest
    for cap in (11_600, 11_500, 1500, 1200, 1000, 700, 300, 1):
        for p, size in zip(paths, sizes, strict=True):
            p.write_bytes(b"x" * size)
        aside.write_bytes(b"y" * 10_000)
        _age(order)
        removed = plan_store.prune(tmp_path, cap, keep=paths[2])
        # the truth: the set-aside file first, then the last-use order oldest first, dropping while
        # over the cap, never the kept one
        left, expect = sum(sizes) + 10_000, []
        if left > cap:
            expect.append(aside)
            left -= 10_000
        for p in order:
            if left <= cap:
                break
            if p != paths[2]:
                expect.append(p)
                left -= sizes[paths.index(p)]
        assert removed == expect, cap
        assert plan_store.store_bytes(tmp_path) == left and paths[2].exists()
        assert aside.exists() == (cap >= sum(sizes) + 10_000)
        assert not list(tmp_path.glob("*.lock"))  # the locks taken to remove entries go with them


def test_prune_leaves_an_entry_whose_lock_is_held(tmp_path: Path) -> None:
    a, b = tmp_path / f"{1:064x}.plan", tmp_path / f"{2:064x}.plan"
    a.write_bytes(b"x" * 100)
    b.write_bytes(b"x" * 100)
    _age([a, b])
    import fcntl

    with open(a.with_suffix(".lock"), "a+b") as fh:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX)
        assert plan_store.prune(tmp_path, 1) == [b]
    assert a.exists() and not b.exists()


def test_a_capped_store_stays_under_its_cap_and_results_do_not_change(tmp_path: Path, reference: Path) -> None:
    shared = tmp_path / "shared"
    _sweep(tmp_path / "sized", plan_store=shared)
    one = max(p.stat().st_size for p in plan_store.entries(shared))
    cap = 2 * one + 1  # room for two entries of the largest size
    shutil.rmtree(shared)
    report = _sweep(tmp_path / "capped", plan_store=shared, plan_store_bytes=cap)
    assert report.plans_made == len(THRESHOLDS)
    assert len(plan_store.entries(shared)) == 2 and plan_store.store_bytes(shared) <= cap
    assert shared.is_dir()  # a named folder is never removed
    _same_tables(reference, tmp_path / "capped")
    _drop_planner_runs(tmp_path / "capped", len(THRESHOLDS))
    again = _sweep(tmp_path / "capped", plan_store=shared, plan_store_bytes=cap)
    assert again.plans_made + again.plans_loaded == len(THRESHOLDS) and again.plans_loaded <= 2
    assert plan_store.store_bytes(shared) <= cap
    _same_tables(reference, tmp_path / "capped")


@pytest.mark.parametrize("bad", [0, -5, 2.5, True, "10"])
def test_a_bad_cap_is_refused_naming_it(tmp_path: Path, bad: Any) -> None:
    from shortcut_gym.lab.sweep.spec import SweepSpecError

    with pytest.raises(SweepSpecError, match="plan_store_bytes must be a whole number of bytes >= 1"):
        run_sweep(_spec(), tmp_path / "s", workers=1, progress=False, plan_store_bytes=bad)
    assert not (tmp_path / "s").exists()


@pytest.mark.parametrize(("kw", "expected"), [
    ({"plan_store": False, "plan_store_bytes": 10**6}, "plan_store_bytes caps the plans on disk"),
    ({"plan_store": False, "keep_plans": True}, "keep_plans applies to the sweep's own"),
    ({"plan_store": "elsewhere", "keep_plans": True}, "keep_plans applies to the sweep's own"),
])
def test_plan_options_that_would_do_nothing_are_refused(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, kw: dict,
                                                        expected: str) -> None:
    from shortcut_gym.lab.sweep.spec import SweepSpecError

    monkeypatch.chdir(tmp_path)
    with pytest.raises(SweepSpecError, match=expected):
        run_sweep(_spec(), tmp_path / "s", workers=1, progress=False, **kw)
    assert not (tmp_path / "s").exists() and not (tmp_path / "elsewhere").exists()
