"""Run a sweep: validate and plan, open (or resume) its folder, compute the missing runs, write outputs.

Everything that can be checked is checked before the folder is touched (the spec, every point's
world, every agent, the backend and its address). A restart of a killed sweep finds the finished
runs on disk, keeps them, and computes only the rest.
"""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from tqdm import tqdm

from shortcut_gym.lab.sweep.backends import LocalBackend, RayBackend, make_backend
from shortcut_gym.lab.sweep.plan import plan_digest, plan_runs
from shortcut_gym.lab.sweep.spec import SweepSpec, load_spec, parse_spec
from shortcut_gym.lab.sweep.store import SweepStore


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

    def lines(self) -> list[str]:
        """Human-readable summary lines."""
        out = [f"sweep folder {self.folder}: {self.total} runs; {self.kept} kept from before, "
               f"{self.computed} computed now in {self.seconds:.1f} s, {len(self.failed)} failed"]
        out += [f"  failed {f['run_id']}: {f['error']}" for f in self.failed]
        out += [f"  wrote {name}: {path}" for name, path in self.outputs.items()]
        return out


def code_digest() -> str:
    """Digest of the world's and the agents' source files: results depend on these."""
    import hashlib

    import shortcut_gym.agents
    import shortcut_gym.envs

    h = hashlib.sha1()
    for pkg in (shortcut_gym.envs, shortcut_gym.agents):
        for f in sorted(Path(pkg.__file__).parent.glob("*.py")):
            h.update(f.name.encode())
            h.update(f.read_bytes())
    return h.hexdigest()[:12]


def _spec_and_source(spec: SweepSpec | dict | str | Path) -> tuple[SweepSpec, str]:
    if isinstance(spec, SweepSpec):
        return spec, "<sweep spec>"
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
    progress: bool = True,
    write_outputs: bool = True,
) -> SweepReport:
    """Compute every run of ``spec`` not yet finished in ``folder``; write tables and plots."""
    start = time.perf_counter()
    sweep, source = _spec_and_source(spec)
    runs = plan_runs(sweep, source)
    digest = plan_digest(runs)
    engine = make_backend(backend, workers, address)  # checks workers and the address first
    store = SweepStore(Path(folder))
    already = store.finished_ids() if store.read_manifest() is not None else set()
    if any(r["run_id"] not in already for r in runs):
        engine.start()  # before the folder is touched: a backend that cannot start writes nothing
    try:
        previous = store.open(sweep.model_dump(mode="json"), runs, digest)
    except BaseException:
        engine.stop()
        raise
    done = store.finished_ids()
    failed_before = store.failed_ids()
    todo = [r for r in runs if r["run_id"] not in done and (retry_failed or r["run_id"] not in failed_before)]
    kept = sum(r["run_id"] in done for r in runs)
    code = code_digest()
    if previous is not None:
        if previous.get("code_digest") not in (None, code):
            print(f"warning: {store.folder}: its finished runs were computed with other envs/agents code "
                  f"({previous.get('code_digest')}, now {code}); they are kept as they are", file=sys.stderr)
        msg = (f"resuming {store.folder}: {kept} of {len(runs)} runs already finished, "
               f"{len(failed_before)} recorded as failed{' (retrying)' if retry_failed else ''}, {len(todo)} to run")
        print(msg, file=sys.stderr)
        store.log({"event": "resume", "kept": kept, "failed_before": len(failed_before), "to_run": len(todo)})
    else:
        store.update_status(runs, {"backend": engine.name, "code_digest": code})
        store.log({"event": "start", "runs": len(runs), "to_run": len(todo), "backend": engine.name})
    computed = 0
    if not todo:
        engine.stop()
    if todo:
        try:
            bar = tqdm(total=kept + len(todo), initial=kept, desc=f"sweep {sweep.name}", unit="run",
                       disable=not progress, file=sys.stderr, dynamic_ncols=True)
            for result in engine.run(todo):
                store.write_result(result)
                computed += 1
                bar.update(1)
            bar.close()
        finally:
            engine.stop()
    status = store.update_status(runs, {"backend": engine.name, "code_digest": code})
    report = SweepReport(store.folder, len(runs), kept, computed, store.failures(), 0.0)
    store.log({"event": "finish", **status})
    if write_outputs:
        from shortcut_gym.lab.sweep.outputs import write_outputs as _write

        report.outputs = _write(sweep, runs, store)
    report.seconds = time.perf_counter() - start
    return report
