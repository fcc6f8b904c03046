"""The plan store's byte cap covers every file the store makes (entries, lock files, temporaries
of a write, damaged entries set aside), and pruning removes what nobody holds any more.

The pruning is checked against a model of the documented policy written out here on its own
(a list walk, no file system), over a family of random stores with held locks; and a sweep
resumed on a damaged, littered store under a cap ends with the folder's bytes within the cap."""

from __future__ import annotations

import contextlib
import fcntl
import os
import random
import threading
import time
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from shortcut_gym.agents.planner import cache, plan_store
from shortcut_gym.lab.sweep.outputs import without_cost_columns
from shortcut_gym.lab.sweep.runner import run_sweep

STEM = "0123456789abcdef" * 4


def _stem(i: int) -> str:
    return f"{i:064x}"


@pytest.mark.parametrize(("name", "kind"), [
    (f"{STEM}.plan", "entry"),
    (f"{STEM}.lock", "lock"),
    (f".{STEM}.plan.4242-0f0f0f0f.tmp", "temporary"),
    (f"{STEM}.plan.damaged-1a2b3c4d", "set aside"),
    ("notes.txt", None),
    ("abc.plan", None),  # not an entry stem
    (f"{STEM.upper()}.plan", None),
    (f"{STEM[:-1]}.plan", None),
    (f"{STEM}.plans", None),
    (f".{STEM}.plan", None),
    (f".{STEM}.lock.tmp", None),
    (".lock", None),
])
def test_file_kinds_are_told_by_name_and_foreign_files_are_not_the_stores(name: str, kind: str | None) -> None:
    assert plan_store.file_kind(name) == kind


def test_store_bytes_counts_every_file_the_store_made_and_nothing_else(tmp_path: Path) -> None:
    made = {f"{_stem(1)}.plan": 300, f"{_stem(1)}.lock": 7, f"{_stem(2)}.lock": 0,
            f".{_stem(3)}.plan.99-ab.tmp": 450, f"{_stem(4)}.plan.damaged-00aa11bb": 1000}
    foreign = {"README.txt": 5000, "x.plan": 800, f"{_stem(5)}.json": 60}
    for name, size in {**made, **foreign}.items():
        (tmp_path / name).write_bytes(b"z" * size)
    (tmp_path / f"{_stem(6)}.plan.damaged-sub").mkdir()  # a folder is no file of the store
    assert plan_store.store_bytes(tmp_path) == sum(made.values()) == 1757
    assert sorted(p.name for _, p, _, _ in plan_store.store_files(tmp_path)) == sorted(made)
    assert plan_store.store_bytes(tmp_path / "missing") == 0


# ---- pruning against a model of the policy --------------------------------------------------

def _model(files: dict[str, tuple[str, str, int, int]], held: set[str], cap: int, keep: str | None) -> set[str]:
    """The names left after a prune, by the documented policy: name -> (kind, stem, size, mtime).

    Always: a lock whose entry is absent, and a temporary whose stem's lock is free (with that lock
    when the entry is absent). Then while over the cap: set-aside files oldest first, then entries
    oldest first (not ``keep``, not held), each with its lock."""
    left = dict(files)
    entries = {stem for kind, stem, _, _ in files.values() if kind == "entry"}
    for name, (kind, stem, _, _) in files.items():
        if kind == "lock" and stem not in entries and stem not in held:
            left.pop(name)
        if kind == "temporary" and stem not in held:
            left.pop(name)
            if stem not in entries:
                left.pop(f"{stem}.lock", None)

    def total() -> int:
        return sum(size for _, _, size, _ in left.values())

    for name, (_, _, _, _) in sorted(((n, v) for n, v in files.items() if v[0] == "set aside"),
                                     key=lambda item: (item[1][3], item[0])):
        if total() <= cap:
            break
        left.pop(name)
    for name, (_, stem, _, _) in sorted(((n, v) for n, v in files.items() if v[0] == "entry"),
                                        key=lambda item: (item[1][3], item[0])):
        if total() <= cap:
            break
        if name == keep or stem in held:
            continue
        left.pop(name)
        left.pop(f"{stem}.lock", None)
    return set(left)


def _random_store(rng: random.Random, folder: Path) -> tuple[dict[str, tuple[str, str, int, int]], set[str]]:
    """Entries (some with lock files holding bytes), orphan locks, temporaries and set-aside files
    of random sizes and distinct ages; and the stems whose lock is to be held."""
    files: dict[str, tuple[str, str, int, int]] = {}
    base = time.time_ns() - 10**12
    ages = rng.sample(range(1000), 40)
    stems = [_stem(i) for i in rng.sample(range(1, 10**6), 14)]
    for i, stem in enumerate(stems[:8]):
        files[f"{stem}.plan"] = ("entry", stem, rng.randint(50, 900), base + ages[i] * 10**6)
        if rng.random() < 0.6:
            files[f"{stem}.lock"] = ("lock", stem, rng.choice([0, 0, 17, 300]), base + ages[20 + i] * 10**6)
    for i, stem in enumerate(stems[8:11]):  # locks of entries gone or never written
        files[f"{stem}.lock"] = ("lock", stem, rng.choice([0, 40]), base + ages[30 + i] * 10**6)
    for i in range(rng.randint(0, 3)):  # temporaries of an entry present or not
        stem = rng.choice(stems[:3] + stems[11:])
        files[f".{stem}.plan.{1000 + i}-{i:08x}.tmp"] = ("temporary", stem, rng.randint(10, 700),
                                                          base + ages[14 + i] * 10**6)
    for i in range(rng.randint(0, 3)):
        stem = rng.choice(stems)
        files[f"{stem}.plan.damaged-{i:08x}"] = ("set aside", stem, rng.randint(100, 1500),
                                                  base + ages[34 + i] * 10**6)
    for name, (_, _, size, mtime) in files.items():
        path = folder / name
        path.write_bytes(b"q" * size)
        os.utime(path, ns=(mtime, mtime))
    present = sorted({stem for _, stem, _, _ in files.values()})
    held = set(rng.sample(present, rng.randint(0, 3)))
    return files, held


@pytest.mark.parametrize("case", range(40))
def test_prune_matches_the_policy_over_random_stores_with_held_locks(tmp_path: Path, case: int) -> None:
    rng = random.Random(9000 + case)
    files, held = _random_store(rng, tmp_path)
    (tmp_path / "someone_elses.txt").write_bytes(b"n" * 10_000)  # not the store's: never counted or removed
    total = sum(size for _, _, size, _ in files.values())
    cap = rng.choice([1, rng.randint(1, total), rng.randint(total // 2, total), total + 5])
    entry_names = [n for n, v in files.items() if v[0] == "entry"]
    keep = rng.choice(entry_names + [None])
    holds = []
    with contextlib.ExitStack() as stack:
        for stem in sorted(held):  # another holder: its own open file description on the lock
            fh = stack.enter_context(open(tmp_path / f"{stem}.lock", "a+b"))
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX)
            holds.append(fh)
        files.update({f"{s}.lock": ("lock", s, (tmp_path / f"{s}.lock").stat().st_size,
                                    (tmp_path / f"{s}.lock").stat().st_mtime_ns) for s in held
                      if f"{s}.lock" not in files})
        expected = _model(files, held, cap, keep)
        removed = plan_store.prune(tmp_path, cap, keep=None if keep is None else tmp_path / keep)
    left = {p.name for _, p, _, _ in plan_store.store_files(tmp_path)}
    assert left == expected, (case, cap, keep, held)
    assert sorted(p.name for p in removed) == sorted(set(files) - expected)
    assert (tmp_path / "someone_elses.txt").stat().st_size == 10_000
    now = plan_store.store_bytes(tmp_path)
    if now > cap:  # only what may not go is left: the kept entry, held keys' files, locks of entries left
        assert not [n for n in left if files[n][0] == "set aside"]
        assert all(n == keep or files[n][1] in held for n in left if files[n][0] == "entry")


def test_prune_with_room_to_spare_still_clears_litter_nobody_holds(tmp_path: Path) -> None:
    entry = tmp_path / f"{_stem(1)}.plan"
    entry.write_bytes(b"e" * 100)
    (tmp_path / f"{_stem(1)}.lock").write_bytes(b"")
    orphan_lock = tmp_path / f"{_stem(2)}.lock"
    orphan_lock.write_bytes(b"pid 77")
    dead_write = tmp_path / f".{_stem(3)}.plan.77-deadbeef.tmp"
    dead_write.write_bytes(b"t" * 500)
    aside = tmp_path / f"{_stem(4)}.plan.damaged-0badf00d"
    aside.write_bytes(b"d" * 50)
    removed = plan_store.prune(tmp_path, 10**6)
    assert sorted(removed) == sorted([orphan_lock, dead_write])
    assert entry.exists() and aside.exists()  # under the cap set-aside files stay for inspection
    assert not (tmp_path / f"{_stem(3)}.lock").exists()  # the lock taken to remove the temporary went too


def test_a_lock_file_removed_while_a_process_waits_for_it_is_taken_again_under_its_name(tmp_path: Path) -> None:
    key = ("world", 1)
    lock = tmp_path / f"{plan_store.entry_name(key)}.lock"
    first = plan_store._take_lock(lock, wait=True)
    assert first is not None
    state: dict[str, Any] = {}

    def waiter() -> None:
        with plan_store.key_lock(tmp_path, key):
            state["held"] = True
            state["free_meanwhile"] = plan_store._take_lock(lock, wait=False)
            state["named_while_held"] = lock.exists()

    thread = threading.Thread(target=waiter)
    thread.start()
    deadline = time.time() + 20
    while not _someone_waits(lock) and time.time() < deadline:
        time.sleep(0.01)
    assert _someone_waits(lock)  # the waiter has the old file open and waits on it
    lock.unlink()  # as a prune does, holding the lock
    plan_store._drop_lock(first)
    thread.join(timeout=30)
    # the waiter holds the file now under the name: another taker is refused
    assert state.get("held") and state["free_meanwhile"] is None
    assert state["named_while_held"]  # it held a file under the name, made anew
    assert not lock.exists()  # and removed it when it let go


def _someone_waits(lock: Path) -> bool:
    """Whether a lock request on ``lock`` is queued (``/proc/locks`` marks waiters with ``->``)."""
    ino = os.stat(lock).st_ino
    with open("/proc/locks") as fh:
        return any("->" in line and line.split()[-3].endswith(f":{ino}") for line in fh)


# ---- a capped sweep over a damaged, littered store ------------------------------------------

SCHEDULE = {"sessions": 2, "trials_per_session": 8, "gap_h": 5.0}
THRESHOLDS = [-3.1, -2.7, -2.3, -1.9]


def _spec() -> dict[str, Any]:
    agents = [{"name": "bounded_optimal", "params": {"n_bins": 6, "n_weight_bins": 3}}, {"name": "always_menu"}]
    return {"name": "plan_cap_test", "base": {"schedule": SCHEDULE},
            "vary": {"design": "grid", "parameters": {"memory.threshold": {"values": THRESHOLDS}}},
            "agents": agents, "seeds": {"first": 5, "count": 3}, "outputs": {"plots": False}}


def _sweep(folder: Path, **kw: Any):  # noqa: ANN202 - SweepReport
    cache.clear_plans()  # one worker runs in this process: forget the plans it holds in memory
    report = run_sweep(_spec(), folder, workers=1, progress=False, **kw)
    assert not report.failed
    return report


def _folder_bytes(folder: Path) -> int:
    """Bytes of every file in the folder, whoever made it."""
    return sum(p.stat().st_size for p in folder.iterdir() if p.is_file())


def test_a_capped_sweep_over_damaged_entries_and_litter_keeps_the_folder_within_the_cap(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    reference = tmp_path / "reference"
    _sweep(reference, plan_store=False)
    shared = tmp_path / "shared"
    first = _sweep(tmp_path / "first", plan_store=shared)
    assert first.plans_made == len(THRESHOLDS)
    entries = plan_store.entries(shared)
    sizes = {p: p.stat().st_size for p in entries}
    largest = max(sizes.values())
    # damage: one entry truncated, two swapped, and what dead processes and old damage leave behind
    original = {p: p.read_bytes() for p in entries}
    entries[0].write_bytes(original[entries[0]][: sizes[entries[0]] // 3])
    entries[1].write_bytes(original[entries[2]])
    entries[2].write_bytes(original[entries[1]])
    litter = {f"{_stem(77)}.lock": 120,  # a stale lock of an entry never written, holding bytes
              f".{entries[3].stem}.plan.31337-0123abcd.tmp": largest,  # a write cut short
              f".{_stem(78)}.plan.31338-4567ef01.tmp": largest // 2,
              f"{_stem(79)}.plan.damaged-00000001": largest,  # set aside by an earlier sweep
              f"{_stem(80)}.plan.damaged-00000002": 2 * largest}
    for name, size in litter.items():
        (shared / name).write_bytes(b"L" * size)
    cap = 2 * largest + 1  # room for two entries
    assert _folder_bytes(shared) > 3 * cap

    seen: list[int] = []
    prune = plan_store.prune

    def watched(store: Path, max_bytes: int, keep: Path | None = None) -> list[Path]:
        removed = prune(store, max_bytes, keep)
        seen.append(_folder_bytes(Path(store)))
        return removed

    monkeypatch.setattr(plan_store, "prune", watched)
    capped = _sweep(tmp_path / "capped", plan_store=shared, plan_store_bytes=cap)
    assert len(seen) == capped.plans_made >= 3  # every plan written was followed by a prune
    assert max(seen) <= cap and _folder_bytes(shared) <= cap
    assert capped.plans_made + capped.plans_loaded == len(THRESHOLDS)
    assert {p.name for p in shared.iterdir()} <= {p.name for _, p, _, _ in plan_store.store_files(shared)}
    assert not [n for n in litter if (shared / n).exists()]
    for x, y in zip(_tables(reference), _tables(tmp_path / "capped"), strict=True):
        pd.testing.assert_frame_equal(x, y, check_exact=True)


def _tables(folder: Path) -> list[pd.DataFrame]:
    return [pd.read_parquet(folder / "results.parquet"), pd.read_parquet(folder / "commands.parquet"),
            pd.read_parquet(folder / "users.parquet"), without_cost_columns(pd.read_csv(folder / "summary.csv"))]
