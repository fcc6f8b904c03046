"""Run a sweep: validate and plan, open (or resume) its folder, compute the missing runs, write outputs.

Everything that can be checked is checked before the folder is touched (the spec, every point's
world, every agent, the backend and its address). A restart of a killed sweep finds the finished
runs on disk, keeps them, and computes only the rest.
"""

from __future__ import annotations

import logging
import os
import shutil
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from tqdm import tqdm

from shortcut_gym.lab.sweep.backends import LocalBackend, RayBackend, make_backend
from shortcut_gym.lab.sweep.integrity import ADOPTED, FolderCheck
from shortcut_gym.lab.sweep.lock import FolderLock, describe_holder
from shortcut_gym.lab.sweep.plan import plan_digest, plan_runs
from shortcut_gym.lab.sweep.spec import SweepSpec, SweepSpecError, load_spec, parse_spec
from shortcut_gym.lab.sweep.store import SweepStore, unique_suffix

log = logging.getLogger(__name__)


@dataclass
class SweepReport:
    """What a sweep call did."""

    folder: Path
    total: int
    kept: int  # finished before this call (resumed)
    computed: int
    failed: list[dict[str, Any]] = field(default_factory=list)
    seconds: float = 0.0
    outputs: dict[str, Path] = field(default_factory=dict)
    recomputed: list[str] = field(default_factory=list)  # finished runs found missing or damaged, computed again
    notes: list[str] = field(default_factory=list)  # what the resume found (stale lock, damaged runs, code change)
    compute_s: float = 0.0  # summed in-worker seconds of the runs computed now, planning included
    plan_s: float = 0.0  # of which planning or reading plans (the plan store: once per world in all)
    plan_wait_s: float = 0.0  # of which waiting for another worker making the same plan (not in plan_s)
    plans_made: int = 0  # plans computed by the runs computed now (at most one per distinct world)
    plans_loaded: int = 0  # plans those runs read from the plan store (made by another worker or sweep)
    warm_up_s: float = 0.0  # seconds the driver spent loading compiled code once before forking workers
    plans_removed_bytes: int | None = None  # bytes of <folder>/plans removed at the end (None: kept or none)

    def failure_lines(self) -> list[str]:
        """One line per failed run (its id and error)."""
        return [f"  failed {f['run_id']}: {f['error']}" for f in self.failed]

    def lines(self) -> list[str]:
        """Human-readable summary lines."""
        out = [f"sweep folder {self.folder}: {self.total} runs; {self.kept} kept from before, "
               f"{self.computed} computed now in {self.seconds:.1f} s, {len(self.failed)} failed"]
        if self.recomputed:
            out.append(f"  {len(self.recomputed)} finished run(s) were missing or damaged and were computed again "
                       f"(damaged files set aside under damaged/): {', '.join(self.recomputed)}")
        if self.computed:
            simulation = self.compute_s - self.plan_s - self.plan_wait_s
            out.append(f"  in-worker compute {self.compute_s:.2f} s: simulation {simulation:.2f} s, "
                       f"planning {self.plan_s:.2f} s ({self.plans_made} plan(s) made, "
                       f"{self.plans_loaded} read from the plan store), waiting for another worker's plan "
                       f"{self.plan_wait_s:.2f} s")
        if self.plans_removed_bytes is not None:
            out.append(f"  removed the sweep's plans ({self.plans_removed_bytes / 1e6:.1f} MB under plans/; "
                       "keep_plans / --keep-plans keeps them)")
        if self.warm_up_s:
            out.append(f"  start-up {self.warm_up_s:.2f} s (compiled code loaded once, before the workers fork)")
        out += self.failure_lines()
        out += [f"  wrote {name}: {path}" for name, path in self.outputs.items()]
        return out


def code_digest() -> str:
    """Digest of the world's and the agents' source files: results depend on these."""
    import hashlib

    import shortcut_gym.agents
    import shortcut_gym.envs

    h = hashlib.sha1()
    for pkg in (shortcut_gym.envs, shortcut_gym.agents):
        for f in sorted(Path(pkg.__file__).parent.glob("*.py")):  # type: ignore[arg-type]
            h.update(f.name.encode())
            h.update(f.read_bytes())
    return h.hexdigest()[:12]


def _lock_notes(lock: FolderLock) -> list[str]:
    if lock.stale is None:
        return []
    state = "no longer running" if lock.stale.get("dead") else "state unknown from this host"
    return [f"note: took over the lock of {describe_holder(lock.stale)} ({state}), which was not released"]


def _check_notes(check: FolderCheck) -> list[str]:
    notes = [f"note: {v.verdict} run {v.run_id}: {v.detail}; computing it again" for v in check.faults]
    notes += [f"note: runs/{s} belongs to no run of this plan; left as it is" for s in check.strays]
    notes += [f"note: runs/{s} is a file of no run of this plan; left as it is" for s in check.loose]
    adopted = check.of(ADOPTED)
    if adopted:
        notes.append(f"note: {len(adopted)} finished run(s) not yet in the manifest were checked and taken in")
    return notes


def _plan_store_of(store: SweepStore, engine: LocalBackend | RayBackend,
                   plan_store: str | Path | bool | None) -> str | None:
    """The plan store folder the workers share (None: each worker keeps its plans in memory).

    ``plan_store``: a folder; False for none; None (or True) for the default place."""
    if plan_store is False:
        return None
    if plan_store is not None and plan_store is not True:
        folder = Path(plan_store).resolve()
        sweep = store.folder.resolve()
        if folder == sweep or folder.is_relative_to(sweep / "runs"):
            raise SweepSpecError(f"plan store {plan_store}: it is the sweep folder {store.folder} or lies under its "
                                 "runs/; use <folder>/plans (the default) or a folder outside it")
        other = _results_holding(folder)
        if other is not None:
            raise SweepSpecError(f"plan store {folder}: it is the sweep folder {other} or lies under its runs/ "
                                 "(another sweep's results); use a folder outside that sweep's results, such as "
                                 f"{other / 'plans'} to share its plans")
        if folder.exists() and not folder.is_dir():
            raise SweepSpecError(f"plan store {plan_store}: is a file, not a folder")
        return str(folder)
    if isinstance(engine, RayBackend) and engine.address is not None:
        return None  # the sweep folder may not be reachable from the cluster's nodes
    return str(store.plans_dir.resolve())


def _results_holding(folder: Path) -> Path | None:
    """The sweep folder (one holding a ``manifest.json``) that ``folder`` is, or lies under the
    ``runs/`` of; None when it is inside no sweep's results."""
    for candidate in (folder, *folder.parents):
        if (candidate / "manifest.json").is_file() and (folder == candidate
                                                        or folder.is_relative_to(candidate / "runs")):
            return candidate
    return None


def _set_aside_plans_file(store: SweepStore) -> list[str]:
    """A file where ``<folder>/plans`` should be is moved under ``damaged/`` (the store is rebuilt)."""
    path = store.plans_dir
    if not path.exists() or path.is_dir():
        return []
    aside = store.folder / "damaged" / f"plans.{unique_suffix()}"
    aside.parent.mkdir(exist_ok=True)
    os.rename(path, aside)
    line = f"note: {path} was a file, not the plan folder; set aside as {aside.name} under damaged/, planning again"
    log.warning(line)
    return [line]


def _remove_plans(store: SweepStore) -> int | None:
    """Remove ``<folder>/plans`` (the sweep's own plan store); its entries' bytes, None when absent."""
    from shortcut_gym.agents.planner.plan_store import store_bytes

    if not store.plans_dir.is_dir():
        return None
    size = store_bytes(store.plans_dir)
    shutil.rmtree(store.plans_dir, ignore_errors=True)
    store.log({"event": "plans_removed", "bytes": size})
    return size


def _spec_and_source(spec: SweepSpec | dict | str | Path) -> tuple[SweepSpec, str]:
    if isinstance(spec, SweepSpec):
        return spec, f"sweep spec {spec.name!r}"
    if isinstance(spec, dict):
        return parse_spec(spec), "<sweep spec>"
    return load_spec(spec), str(spec)


def run_sweep(
    spec: SweepSpec | dict | str | Path,
    folder: str | Path,
    backend: str | LocalBackend | RayBackend = "local",
    workers: int | None = None,
    address: str | None = None,
    retry_failed: bool = False,
    progress: bool = False,
    write_outputs: bool = True,
    plan_store: str | Path | bool | None = None,
    keep_plans: bool = False,
    plan_store_bytes: int | None = None,
) -> SweepReport:
    """Compute every run of ``spec`` not yet finished in ``folder``; write tables and plots.

    Planner plans go through an on-disk plan store shared by every worker: ``plan_store`` (a
    folder, which several sweeps may share), by default (None) ``<folder>/plans``; for a Ray
    cluster at ``address`` only when ``plan_store`` is given (a folder every node can reach). Each
    distinct world and planning options is then planned once in all, whatever the worker count.
    ``plan_store=False``: no plans on disk (each worker plans every world it meets, in memory).

    When the sweep finishes, its own ``<folder>/plans`` is removed unless ``keep_plans`` (a
    resumed or retried sweep plans again what it needs; results are the same). A ``plan_store``
    folder given here is the user's and is never removed; ``plan_store_bytes`` caps its files
    (or the default store's while the sweep runs; entries, lock files, temporaries and damaged
    entries set aside all count): each worker prunes after writing an entry
    (:func:`shortcut_gym.agents.planner.plan_store.prune`). ``progress``: draw a progress bar on
    stderr (off by default: a library call prints nothing; the CLI turns it on)."""
    start = time.perf_counter()
    sweep, source = _spec_and_source(spec)
    runs = plan_runs(sweep, source)
    digest = plan_digest(runs)
    engine = make_backend(backend, workers, address)  # checks workers and the address first
    store = SweepStore(Path(folder))
    shared = _plan_store_of(store, engine, plan_store)  # checked before the folder is touched
    if plan_store_bytes is not None and (isinstance(plan_store_bytes, bool) or not isinstance(plan_store_bytes, int)
                                         or plan_store_bytes < 1):
        raise SweepSpecError(f"plan_store_bytes must be a whole number of bytes >= 1, got {plan_store_bytes!r}")
    own_plans = shared is not None and Path(shared) == store.plans_dir.resolve()
    if plan_store_bytes is not None and shared is None:
        raise SweepSpecError("plan_store_bytes caps the plans on disk, and this sweep keeps none there "
                             "(plan_store=False, or a Ray cluster address without a plan_store folder)")
    if keep_plans and not own_plans:
        raise SweepSpecError("keep_plans applies to the sweep's own <folder>/plans; a plan_store folder given is "
                             "always kept, and with plan_store=False there are no plans on disk")
    store.check_usable()
    started = False
    if not store.manifest_path.is_file():
        engine.start()  # before the folder is touched: a backend that cannot start writes nothing
        started = True
    lock = FolderLock(store.folder)
    try:
        lock.acquire()
    except BaseException:
        if started:
            engine.stop()
        raise
    computed = plans_made = plans_loaded = 0
    compute_s = plan_s = plan_wait_s = 0.0
    try:
        previous = store.open(sweep.model_dump(mode="json"), runs, digest)
        check = store.check([r["run_id"] for r in runs]) if previous is not None else None
        redo = store.repair(check) if check is not None else []
        done = store.finished_ids()
        failed_before = store.failed_ids()
        todo = [r for r in runs if r["run_id"] not in done and (retry_failed or r["run_id"] not in failed_before)]
        kept = sum(r["run_id"] in done for r in runs)
        code = code_digest()
        notes = _lock_notes(lock) + (_check_notes(check) if check is not None else [])
        if previous is not None:
            if previous.get("code_digest") not in (None, code):
                notes.append(f"warning: {store.folder}: its finished runs were computed with other envs/agents code "
                             f"({previous.get('code_digest')}, now {code}); they are kept as they are")
            notes.append(f"resuming {store.folder}: {kept} of {len(runs)} runs already finished, "
                         f"{len(failed_before)} recorded as failed{' (retrying)' if retry_failed else ''}, "
                         f"{len(todo)} to run")
            store.log({"event": "resume", "kept": kept, "failed_before": len(failed_before), "to_run": len(todo),
                       "recomputed": redo, "stale_lock": lock.stale})
        else:
            store.update_status(runs, {"backend": engine.name, "code_digest": code})
            store.log({"event": "start", "runs": len(runs), "to_run": len(todo), "backend": engine.name,
                       "stale_lock": lock.stale})
        for line in notes:
            (log.warning if line.startswith("warning") else log.info)(line)
        if todo and not started:
            engine.start()
            started = True
        if todo:
            bar = tqdm(total=kept + len(todo), initial=kept, desc=f"sweep {sweep.name}", unit="run",
                       disable=not progress, file=sys.stderr, dynamic_ncols=True)
            if shared is not None:
                if own_plans:
                    notes += _set_aside_plans_file(store)
                todo = [{**r, "plan_store": shared, "plan_store_bytes": plan_store_bytes} for r in todo]
            for result in engine.run(todo):
                store.write_result(result)
                computed += 1
                compute_s += float(result.get("compute_s") or 0.0)
                plan_s += float(result.get("plan_s") or 0.0)
                plan_wait_s += float(result.get("plan_wait_s") or 0.0)
                plans_made += int(result.get("plans_made") or 0)
                plans_loaded += int(result.get("plans_loaded") or 0)
                bar.update(1)
            bar.close()
        if started:
            engine.stop()
            started = False
        status = store.update_status(runs, {"backend": engine.name, "code_digest": code})
        removed = _remove_plans(store) if own_plans and not keep_plans else None
        report = SweepReport(store.folder, len(runs), kept, computed, store.failures(), 0.0, recomputed=redo,
                             notes=notes, compute_s=compute_s, plan_s=plan_s, plan_wait_s=plan_wait_s,
                             plans_made=plans_made, plans_loaded=plans_loaded,
                             warm_up_s=float(getattr(engine, "warm_up_s", 0.0)), plans_removed_bytes=removed)
        store.log({"event": "finish", **status, "plans_made": plans_made, "plans_loaded": plans_loaded})
        if write_outputs:
            from shortcut_gym.lab.sweep.outputs import write_outputs as _write

            report.outputs = _write(sweep, runs, store)
    finally:
        if started:
            engine.stop()
        store.flush(force=True)
        lock.release()
    report.seconds = time.perf_counter() - start
    return report
