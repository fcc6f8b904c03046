"""The sweep folder: atomic per-run results, the manifest, and what a restart finds done.

Layout::

    <folder>/manifest.json        the plan (runs, points, agents), its digest, status counts
    <folder>/spec.json            the validated spec
    <folder>/runs/<run_id>/       one finished run: blocks.parquet, commands.parquet, meta.json
    <folder>/runs/<run_id>.failed.json   one failed run: its error and traceback
    <folder>/log.jsonl            one line per event (start, resume, run done / failed, finish)

A run's folder is filled under a temporary name and renamed into place in one step, so a run is
either wholly present or absent; a failure record is written to a temporary file and renamed.
"""

from __future__ import annotations

import json
import os
import shutil
import time
from pathlib import Path
from typing import Any

import pandas as pd

from shortcut_gym.lab.sweep.spec import SweepSpecError

TMP_PREFIX = ".tmp-"


def atomic_write_text(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file and a rename (fsync'd)."""
    tmp = path.with_name(f"{TMP_PREFIX}{path.name}.{os.getpid()}")
    with open(tmp, "w") as fh:
        fh.write(text)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


class SweepStore:
    """Reads and writes one sweep folder."""

    def __init__(self, folder: Path) -> None:
        self.folder = Path(folder)
        self.runs_dir = self.folder / "runs"
        self.manifest_path = self.folder / "manifest.json"

    # ---- manifest ------------------------------------------------------------------------------
    def read_manifest(self) -> dict[str, Any] | None:
        """The manifest, or None for a new folder."""
        if not self.manifest_path.is_file():
            return None
        try:
            return json.loads(self.manifest_path.read_text())
        except json.JSONDecodeError as err:
            raise SweepSpecError(f"{self.manifest_path}: not a readable sweep manifest ({err})") from None

    def open(self, spec_data: dict[str, Any], runs: list[dict[str, Any]], plan_digest: str) -> dict[str, Any] | None:
        """Create the folder for this plan, or check an existing one holds the same plan.

        Returns the previous manifest when resuming (None when new).
        """
        old = self.read_manifest()
        if old is not None and old.get("plan_digest") != plan_digest:
            raise SweepSpecError(
                f"{self.folder}: this folder holds another sweep ({old.get('name')!r}, plan {old.get('plan_digest')}); "
                f"this spec's plan is {plan_digest}. Use another output folder."
            )
        if old is None and self.folder.exists() and any(self.folder.iterdir()):
            raise SweepSpecError(f"{self.folder}: the folder is not empty and holds no sweep manifest; "
                                 "use an empty or new folder")
        self.runs_dir.mkdir(parents=True, exist_ok=True)
        for stale in self.runs_dir.glob(f"{TMP_PREFIX}*"):
            shutil.rmtree(stale, ignore_errors=True) if stale.is_dir() else stale.unlink(missing_ok=True)
        if old is None:
            manifest = {
                "name": spec_data.get("name"), "plan_digest": plan_digest, "created": time.time(),
                "runs": [{"index": r["index"], "run_id": r["run_id"], "point_index": r["point_index"],
                          "point": r["point"], "agent": r["label"], "seeds": len(r["seeds"])} for r in runs],
                "status": {"done": 0, "failed": 0, "pending": len(runs)},
            }
            atomic_write_text(self.folder / "spec.json", json.dumps(spec_data, indent=1, default=str))
            atomic_write_text(self.manifest_path, json.dumps(manifest, indent=1, default=str))
            return None
        return old

    def update_status(self, runs: list[dict[str, Any]], extra: dict[str, Any] | None = None) -> dict[str, int]:
        """Recount done / failed / pending runs and rewrite the manifest."""
        manifest = self.read_manifest() or {}
        done, failed = self.finished_ids(), self.failed_ids()
        status = {"done": sum(r["run_id"] in done for r in runs), "failed": sum(r["run_id"] in failed for r in runs)}
        status["pending"] = len(runs) - status["done"] - status["failed"]
        manifest["status"] = status
        manifest["updated"] = time.time()
        manifest.update(extra or {})
        atomic_write_text(self.manifest_path, json.dumps(manifest, indent=1, default=str))
        return status

    # ---- runs ----------------------------------------------------------------------------------
    def finished_ids(self) -> set[str]:
        """Ids of runs whose results are wholly on disk."""
        if not self.runs_dir.is_dir():
            return set()
        return {p.name for p in self.runs_dir.iterdir() if p.is_dir() and not p.name.startswith(TMP_PREFIX)
                and (p / "meta.json").is_file()}

    def failed_ids(self) -> set[str]:
        """Ids of runs recorded as failed (and not finished since)."""
        if not self.runs_dir.is_dir():
            return set()
        failed = {p.name[: -len(".failed.json")] for p in self.runs_dir.glob("*.failed.json")}
        return failed - self.finished_ids()

    def write_result(self, result: dict[str, Any]) -> None:
        """Store one run's result atomically (a folder rename, or a failure file rename)."""
        run_id = result["run_id"]
        if result["status"] == "failed":
            record = {k: result.get(k) for k in ("run_id", "status", "error", "traceback", "compute_s", "pid")}
            atomic_write_text(self.runs_dir / f"{run_id}.failed.json", json.dumps(record, indent=1))
            self.log({"event": "run_failed", "run_id": run_id, "error": result.get("error")})
            return
        tmp = self.runs_dir / f"{TMP_PREFIX}{run_id}.{os.getpid()}"
        if tmp.exists():
            shutil.rmtree(tmp)
        tmp.mkdir()
        for table in ("blocks", "commands", "trials"):
            if table in result:
                result[table].to_parquet(tmp / f"{table}.parquet", index=False)
        meta = {"run_id": run_id, "status": "done", "compute_s": result.get("compute_s"), "pid": result.get("pid"),
                "written": time.time()}
        (tmp / "meta.json").write_text(json.dumps(meta, indent=1))
        for f in tmp.iterdir():
            with open(f, "rb") as fh:
                os.fsync(fh.fileno())
        final = self.runs_dir / run_id
        if final.exists():  # a stale copy (should not happen: finished runs are never recomputed)
            shutil.rmtree(final)
        os.rename(tmp, final)
        (self.runs_dir / f"{run_id}.failed.json").unlink(missing_ok=True)
        self.log({"event": "run_done", "run_id": run_id})

    def read_table(self, runs: list[dict[str, Any]], table: str) -> pd.DataFrame:
        """One table concatenated over the finished runs, in run order."""
        done = self.finished_ids()
        frames = [pd.read_parquet(self.runs_dir / r["run_id"] / f"{table}.parquet")
                  for r in runs if r["run_id"] in done and (self.runs_dir / r["run_id"] / f"{table}.parquet").is_file()]
        if not frames:
            return pd.DataFrame()
        return pd.concat(frames, ignore_index=True)

    def failures(self) -> list[dict[str, Any]]:
        """The failure records of the runs that failed."""
        return [json.loads((self.runs_dir / f"{i}.failed.json").read_text()) for i in sorted(self.failed_ids())]

    def log(self, event: dict[str, Any]) -> None:
        """Append one event line to log.jsonl."""
        with open(self.folder / "log.jsonl", "a") as fh:
            fh.write(json.dumps({"time": time.time(), **event}, default=str) + "\n")
