"""The sweep folder: atomic per-run results, the manifest with each finished run's digests, and
the check of what a restart finds done.

Layout::

    <folder>/manifest.json        the plan (runs, points, agents), its digest, status counts, and
                                  ``finished``: run id -> file name -> SHA-256 of each finished run
    <folder>/spec.json            the validated spec (rewritten on a compatible resume)
    <folder>/.lock                the OS lock of the process working on the folder (pid, host)
    <folder>/runs/<run_id>/       one finished run: blocks.parquet, commands.parquet, users.parquet, meta.json
    <folder>/runs/<run_id>.failed.json   one failed run: its error and traceback
    <folder>/plans/               the plan store shared by the sweep's workers (one verified entry per
                                  world and planning options, see agents.planner.plan_store); removed
                                  when the sweep finishes unless it is asked to keep it
    <folder>/damaged/             runs set aside by a resume because their files were damaged
    <folder>/log.jsonl            one line per event (start, resume, check, run done / failed, finish)

A run's folder is filled under a temporary name unique to the process and renamed into place in
one step, so a run is either wholly present or absent; a failure record is written to a
temporary file and renamed. The manifest is rewritten at most every ``FLUSH_S`` seconds while
runs finish (a run finished but not yet in the manifest is taken in on resume when its
``meta.json`` digests match its files).
"""

from __future__ import annotations

import json
import os
import secrets
import shutil
import time
from pathlib import Path
from typing import Any

import pandas as pd

from shortcut_gym.lab.sweep.integrity import (
    ADOPTED,
    OK,
    FolderCheck,
    check_run,
    file_digest,
    folder_digests,
)
from shortcut_gym.lab.sweep.lock import LOCK_NAME
from shortcut_gym.lab.sweep.spec import SweepSpecError

TMP_PREFIX = ".tmp-"
#: Most seconds between two manifest rewrites while runs finish.
FLUSH_S = 2.0


def unique_suffix() -> str:
    """A name part unique to this process and call: pid and 8 random hex digits."""
    return f"{os.getpid()}.{secrets.token_hex(4)}"


def atomic_write_text(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file of a unique name and a rename (fsync'd)."""
    tmp = path.with_name(f"{TMP_PREFIX}{path.name}.{unique_suffix()}")
    try:
        with open(tmp, "w") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


class SweepStore:
    """Reads and writes one sweep folder (the caller holds its :class:`FolderLock` while writing)."""

    def __init__(self, folder: Path) -> None:
        self.folder = Path(folder)
        self.runs_dir = self.folder / "runs"
        self.manifest_path = self.folder / "manifest.json"
        self.plans_dir = self.folder / "plans"
        #: run id -> file digests of the finished runs this store knows (loaded by ``open``/``check``).
        self.finished: dict[str, dict[str, str]] = {}
        self._dirty_since: float | None = None

    # ---- manifest ------------------------------------------------------------------------------
    def read_manifest(self) -> dict[str, Any] | None:
        """The manifest, or None for a new folder."""
        if not self.manifest_path.is_file():
            return None
        try:
            data = json.loads(self.manifest_path.read_text())
        except (json.JSONDecodeError, UnicodeDecodeError) as err:
            raise SweepSpecError(f"{self.manifest_path}: not a readable sweep manifest ({err})") from None
        if not isinstance(data, dict) or not isinstance(data.get("runs"), list):
            raise SweepSpecError(f"{self.manifest_path}: not a sweep manifest (no list of runs)")
        finished = data.get("finished", {})
        if not isinstance(finished, dict) or not all(isinstance(v, dict) for v in finished.values()):
            raise SweepSpecError(f"{self.manifest_path}: its 'finished' record is damaged")
        return data

    def check_usable(self) -> None:
        """Refuse, before anything is written, a folder that is neither new, empty nor a sweep folder."""
        if self.folder.exists() and not self.folder.is_dir():
            raise SweepSpecError(f"{self.folder}: is a file, not a sweep folder")
        if (not self.manifest_path.is_file() and self.folder.is_dir()
                and any(p.name != LOCK_NAME for p in self.folder.iterdir())):
            raise SweepSpecError(f"{self.folder}: the folder is not empty and holds no sweep manifest; "
                                 "use an empty or new folder")

    def open(self, spec_data: dict[str, Any], runs: list[dict[str, Any]], plan_digest: str) -> dict[str, Any] | None:
        """Create the folder for this plan, or check an existing one holds the same plan.

        On a resume the spec and the manifest's plan fields are rewritten (a compatible spec may
        differ in what does not change the runs, e.g. its description or outputs). Returns the
        previous manifest when resuming (None when new).
        """
        old = self.read_manifest()
        if old is not None and old.get("plan_digest") != plan_digest:
            raise SweepSpecError(
                f"{self.folder}: this folder holds another sweep ({old.get('name')!r}, plan {old.get('plan_digest')}); "
                f"this spec's plan is {plan_digest}. Use another output folder."
            )
        if old is None and self.folder.exists() and any(p.name != LOCK_NAME for p in self.folder.iterdir()):
            raise SweepSpecError(f"{self.folder}: the folder is not empty and holds no sweep manifest; "
                                 "use an empty or new folder")
        self.runs_dir.mkdir(parents=True, exist_ok=True)
        for stale in self.runs_dir.glob(f"{TMP_PREFIX}*"):  # safe: the caller holds the folder's lock
            shutil.rmtree(stale, ignore_errors=True) if stale.is_dir() else stale.unlink(missing_ok=True)
        for stale in self.folder.glob(f"{TMP_PREFIX}*"):
            stale.unlink(missing_ok=True)
        plan = {
            "name": spec_data.get("name"), "plan_digest": plan_digest,
            "runs": [{"index": r["index"], "run_id": r["run_id"], "point_index": r["point_index"],
                      "point": r["point"], "agent": r["label"], "seeds": len(r["seeds"])} for r in runs],
        }
        atomic_write_text(self.folder / "spec.json", json.dumps(spec_data, indent=1, default=str))
        if old is None:
            manifest = {**plan, "created": time.time(), "finished": {},
                        "status": {"done": 0, "failed": 0, "pending": len(runs)}}
            self.finished = {}
        else:
            manifest = {**old, **plan, "resumed": [*old.get("resumed", []), time.time()]}
            self.finished = {k: dict(v) for k, v in old.get("finished", {}).items()}
        self._write_manifest(manifest)
        return old

    def _write_manifest(self, manifest: dict[str, Any]) -> None:
        manifest["finished"] = self.finished
        atomic_write_text(self.manifest_path, json.dumps(manifest, indent=1, default=str))
        self._dirty_since = None

    def update_status(self, runs: list[dict[str, Any]], extra: dict[str, Any] | None = None) -> dict[str, int]:
        """Recount done / failed / pending runs and rewrite the manifest (with the finished runs' digests)."""
        manifest = self.read_manifest() or {}
        done, failed = self.finished_ids(), self.failed_ids()
        status = {"done": sum(r["run_id"] in done for r in runs), "failed": sum(r["run_id"] in failed for r in runs)}
        status["pending"] = len(runs) - status["done"] - status["failed"]
        manifest["status"] = status
        manifest["updated"] = time.time()
        manifest.update(extra or {})
        self._write_manifest(manifest)
        return status

    def flush(self, force: bool = False) -> None:
        """Write the finished runs' digests to the manifest if due (``FLUSH_S``) or forced."""
        if self._dirty_since is None:
            return
        if force or time.monotonic() - self._dirty_since >= FLUSH_S:
            manifest = self.read_manifest() or {}
            self._write_manifest(manifest)

    # ---- checking ------------------------------------------------------------------------------
    def check(self, run_ids: list[str] | None = None) -> FolderCheck:
        """Check every finished run against its digests (no table is parsed, nothing is changed).

        ``run_ids`` defaults to the manifest's plan. Loads the manifest's finished record.
        """
        manifest = self.read_manifest()
        if manifest is None:
            raise SweepSpecError(f"{self.folder}: not a sweep folder (no manifest.json)")
        planned = run_ids if run_ids is not None else [str(r.get("run_id")) for r in manifest["runs"]]
        recorded = {k: dict(v) for k, v in manifest.get("finished", {}).items()}
        self.finished = recorded
        result = FolderCheck(self.folder, len(planned))
        for run_id in planned:
            verdict = check_run(self.runs_dir / run_id, run_id, recorded.get(run_id))
            if verdict.verdict:
                result.verdicts.append(verdict)
        known = set(planned)
        if self.runs_dir.is_dir():
            result.strays = sorted(p.name for p in self.runs_dir.iterdir() if p.is_dir()
                                   and not p.name.startswith(TMP_PREFIX) and p.name not in known)
            failure_records = {f"{run_id}.failed.json" for run_id in known}
            result.loose = sorted(p.name for p in self.runs_dir.iterdir() if not p.is_dir()
                                  and not p.name.startswith(TMP_PREFIX) and p.name not in failure_records)
        return result

    def repair(self, check: FolderCheck) -> list[str]:
        """Act on a check: take in adopted runs, set damaged ones aside under ``damaged/``, forget missing ones.

        Returns the ids of the runs that are no longer finished (to be computed again).
        """
        redo = []
        for v in check.verdicts:
            if v.verdict == ADOPTED:
                self.finished[v.run_id] = folder_digests(self.runs_dir / v.run_id)
            elif v.verdict != OK:
                self.finished.pop(v.run_id, None)
                run_dir = self.runs_dir / v.run_id
                if run_dir.exists():
                    aside = self.folder / "damaged" / f"{v.run_id}.{unique_suffix()}"
                    aside.parent.mkdir(exist_ok=True)
                    os.rename(run_dir, aside)
                redo.append(v.run_id)
        for name in check.strays:
            self.finished.pop(name, None)
        self._dirty_since = time.monotonic()
        self.flush(force=True)
        return redo

    # ---- runs ----------------------------------------------------------------------------------
    def finished_ids(self) -> set[str]:
        """Ids of the runs recorded as finished whose folders are present."""
        return {r for r in self.finished if (self.runs_dir / r).is_dir()}

    def failed_ids(self) -> set[str]:
        """Ids of runs recorded as failed (and not finished since)."""
        if not self.runs_dir.is_dir():
            return set()
        failed = {p.name[: -len(".failed.json")] for p in self.runs_dir.glob("*.failed.json")}
        return failed - self.finished_ids()

    def write_result(self, result: dict[str, Any]) -> None:
        """Store one run's result atomically (a folder rename, or a failure file rename) and record its digests."""
        run_id = result["run_id"]
        if result["status"] == "failed":
            keys = ("run_id", "status", "error", "traceback", "compute_s", "plan_s", "plan_wait_s", "plans_made",
                    "plans_loaded", "pid")
            record = {k: result.get(k) for k in keys}
            atomic_write_text(self.runs_dir / f"{run_id}.failed.json", json.dumps(record, indent=1))
            self.log({"event": "run_failed", "run_id": run_id, "error": result.get("error")})
            return
        tmp = self.runs_dir / f"{TMP_PREFIX}{run_id}.{unique_suffix()}"
        tmp.mkdir()
        try:
            tables: dict[str, str] = {}
            for table in ("blocks", "commands", "users", "trials"):
                if table in result:
                    path = tmp / f"{table}.parquet"
                    result[table].to_parquet(path, index=False)
                    tables[path.name] = file_digest(path)
            meta = {"run_id": run_id, "status": "done", "compute_s": result.get("compute_s"),
                    "plan_s": result.get("plan_s"), "plan_wait_s": result.get("plan_wait_s"),
                    "plans_made": result.get("plans_made"),
                    "plans_loaded": result.get("plans_loaded"), "compute_cpu_s": result.get("compute_cpu_s"),
                    "plan_cpu_s": result.get("plan_cpu_s"), "pid": result.get("pid"),
                    "written": time.time(), "files": tables}
            (tmp / "meta.json").write_text(json.dumps(meta, indent=1))
            for f in tmp.iterdir():
                with open(f, "rb") as fh:
                    os.fsync(fh.fileno())
            digests = folder_digests(tmp)
            final = self.runs_dir / run_id
            if final.exists():  # an unrecorded copy (set aside by repair before, so only a race leaves one)
                shutil.rmtree(final)
            os.rename(tmp, final)
        finally:
            if tmp.exists():
                shutil.rmtree(tmp, ignore_errors=True)
        (self.runs_dir / f"{run_id}.failed.json").unlink(missing_ok=True)
        self.finished[run_id] = digests
        if self._dirty_since is None:
            self._dirty_since = time.monotonic()
        self.log({"event": "run_done", "run_id": run_id})
        self.flush()

    def read_table(self, runs: list[dict[str, Any]], table: str) -> pd.DataFrame:
        """One table concatenated over the finished runs, in run order."""
        done = self.finished_ids()
        frames = [pd.read_parquet(self.runs_dir / r["run_id"] / f"{table}.parquet")
                  for r in runs if r["run_id"] in done and (self.runs_dir / r["run_id"] / f"{table}.parquet").is_file()]
        if not frames:
            return pd.DataFrame()
        return pd.concat(frames, ignore_index=True)

    def read_metas(self, runs: list[dict[str, Any]]) -> dict[str, dict[str, Any]]:
        """Run id -> the ``meta.json`` record of each finished run (an unreadable one as {})."""
        done = self.finished_ids()
        out: dict[str, dict[str, Any]] = {}
        for r in runs:
            if r["run_id"] in done:
                try:
                    meta = json.loads((self.runs_dir / r["run_id"] / "meta.json").read_text())
                except (OSError, ValueError):
                    meta = {}
                out[r["run_id"]] = meta if isinstance(meta, dict) else {}
        return out

    def failures(self) -> list[dict[str, Any]]:
        """The failure records of the runs that failed."""
        return [json.loads((self.runs_dir / f"{i}.failed.json").read_text()) for i in sorted(self.failed_ids())]

    def log(self, event: dict[str, Any]) -> None:
        """Append one event line to log.jsonl."""
        with open(self.folder / "log.jsonl", "a") as fh:
            fh.write(json.dumps({"time": time.time(), **event}, default=str) + "\n")
