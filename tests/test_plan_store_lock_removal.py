"""A plan entry's lock file is removed by the process holding it when it lets go (after writing or
reading the entry), so a store holds plans only; taking the lock stays exclusive while lock files
come and go under processes waiting on them. Checked with real processes."""

from __future__ import annotations

import multiprocessing as mp
import time
from pathlib import Path

from shortcut_gym.agents.planner import cache, plan_store
from shortcut_gym.envs import make_world

SCHEDULE = {"sessions": 2, "trials_per_session": 6, "gap_h": 4.0}
KEY = ("a key of our own", 1, 2, None, 3, 4)


def _count_under_lock(store: str, counter: str, rounds: int, start: float) -> None:
    """Increment the number in ``counter`` ``rounds`` times, each read-pause-write under the key's lock."""
    while time.time() < start:  # every process starts together, so they contend
        time.sleep(0.001)
    for _ in range(rounds):
        with plan_store.key_lock(Path(store), KEY):
            value = int(Path(counter).read_text())
            time.sleep(0.0005)  # a lost update shows if two processes are in here at once
            Path(counter).write_text(str(value + 1))


def _plan_in(store: str, start: float, out: str) -> None:
    """Ask the shared store for one world's plan; record made / read counts."""
    while time.time() < start:
        time.sleep(0.001)
    world = make_world(schedule=SCHEDULE)
    made, loaded = cache.plans_made(), cache.plans_loaded()  # a forked child inherits the counts
    cache.clear_plans()
    with plan_store.using_plan_store(store):
        cache.cached_plan(world, world.horizon, 6, None, 3)
    Path(out).write_text(f"{cache.plans_made() - made} {cache.plans_loaded() - loaded}")


def _lock_files(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".lock"))


def test_the_key_lock_stays_exclusive_across_processes_while_lock_files_are_removed(tmp_path: Path) -> None:
    store, counter = tmp_path / "store", tmp_path / "counter"
    store.mkdir()
    counter.write_text("0")
    ctx = mp.get_context("fork")
    start = time.time() + 2.0
    procs = [ctx.Process(target=_count_under_lock, args=(str(store), str(counter), 60, start)) for _ in range(3)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(120)
        assert p.exitcode == 0
    assert int(counter.read_text()) == 3 * 60  # no two processes held the lock at once
    assert _lock_files(store) == []


def test_two_processes_share_one_plan_and_leave_no_lock_file(tmp_path: Path) -> None:
    store = tmp_path / "store"
    ctx = mp.get_context("fork")
    start = time.time() + 3.0
    outs = [tmp_path / f"out{i}" for i in range(2)]
    procs = [ctx.Process(target=_plan_in, args=(str(store), start, str(o))) for o in outs]
    for p in procs:
        p.start()
    for p in procs:
        p.join(300)
        assert p.exitcode == 0
    counts = sorted(tuple(map(int, o.read_text().split())) for o in outs)
    assert counts == [(0, 1), (1, 0)]  # one made it, the other read it
    assert [p.suffix for p in store.iterdir()] == [".plan"]
    # a third use (reading it) leaves no lock either, and the cap's count is the plan's bytes alone
    _plan_in(str(store), 0.0, str(tmp_path / "out3"))
    assert _lock_files(store) == []
    assert plan_store.store_bytes(store) == sum(p.stat().st_size for p in store.glob("*.plan"))


def test_a_capped_store_is_pruned_and_keeps_no_lock_files(tmp_path: Path) -> None:
    worlds = [make_world(schedule={**SCHEDULE, "gap_h": g}) for g in (3.0, 5.0, 9.0)]
    with plan_store.using_plan_store(tmp_path, max_bytes=1):
        for w in worlds:
            cache.clear_plans()
            cache.cached_plan(w, w.horizon, 6, None, 3)
            assert _lock_files(tmp_path) == []
            assert len(list(tmp_path.glob("*.plan"))) == 1  # the one just written survives the cap
