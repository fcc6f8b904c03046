"""Content digests of finished sweep runs, and the check of a sweep folder against them.

Each finished run folder holds its tables and ``meta.json``; the meta file records the SHA-256
of every table, and the manifest records the SHA-256 of every file of the run (meta included).
A check reads every file of every finished run once (no table is parsed), so a missing,
truncated, edited or swapped file is found: the tables carry their run's id, so two runs' files
never share a digest.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

#: Chunk size (bytes) for hashing files.
_CHUNK = 1 << 20

# Verdicts of one run.
OK = "ok"  # recorded in the manifest and every file matches
ADOPTED = "adopted"  # finished but not yet in the manifest (a kill between the two); meta's digests match
MISSING = "missing"  # recorded as finished, its folder is gone
DAMAGED = "damaged"  # a file is missing, extra, or differs from its digest, or meta.json is unreadable


def file_digest(path: Path) -> str:
    """SHA-256 (hex) of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(_CHUNK):
            h.update(chunk)
    return h.hexdigest()


def folder_digests(folder: Path) -> dict[str, str]:
    """File name -> SHA-256 of every file directly in ``folder`` (sorted by name)."""
    return {p.name: file_digest(p) for p in sorted(folder.iterdir()) if p.is_file()}


@dataclass(frozen=True)
class RunVerdict:
    """The check of one run: its id, the verdict and, for a fault, what is wrong."""

    run_id: str
    verdict: str
    detail: str = ""


@dataclass
class FolderCheck:
    """The check of a whole sweep folder."""

    folder: Path
    planned: int
    verdicts: list[RunVerdict] = field(default_factory=list)
    strays: list[str] = field(default_factory=list)  # run folders that belong to no planned run
    loose: list[str] = field(default_factory=list)  # files in runs/ that belong to no planned run

    def of(self, *kinds: str) -> list[RunVerdict]:
        """The verdicts of the given kinds."""
        return [v for v in self.verdicts if v.verdict in kinds]

    @property
    def faults(self) -> list[RunVerdict]:
        """Runs that were finished and no longer are (missing or damaged)."""
        return self.of(MISSING, DAMAGED)

    @property
    def intact(self) -> bool:
        """True when no finished run is missing or damaged and no stray folder or loose file is present."""
        return not self.faults and not self.strays and not self.loose

    def lines(self) -> list[str]:
        """Readable summary: counts, then one line per fault."""
        done = len(self.of(OK, ADOPTED))
        out = [f"{self.folder}: {self.planned} runs planned, {done} finished and intact, "
               f"{len(self.of(MISSING))} missing, {len(self.of(DAMAGED))} damaged, {len(self.strays)} stray folder(s), "
               f"{len(self.loose)} loose file(s)"]
        out += [f"  {v.verdict} {v.run_id}: {v.detail}" for v in self.faults]
        out += [f"  stray runs/{s}: not a run of this sweep's plan" for s in self.strays]
        out += [f"  loose runs/{s}: a file of no run of this sweep's plan" for s in self.loose]
        return out


def _compare(recorded: dict[str, str], actual: dict[str, str]) -> str:
    """'' when the digests agree, else what differs."""
    problems = [f"{n} is missing" for n in sorted(set(recorded) - set(actual))]
    problems += [f"{n} is not part of the run" for n in sorted(set(actual) - set(recorded))]
    problems += [f"{n} differs from its digest (changed, truncated or swapped)"
                 for n in sorted(set(recorded) & set(actual)) if recorded[n] != actual[n]]
    return "; ".join(problems)


def check_run(run_dir: Path, run_id: str, recorded: dict[str, str] | None) -> RunVerdict:
    """Verdict of one run folder against the manifest's digests (None: not recorded there)."""
    if not run_dir.is_dir():
        return RunVerdict(run_id, MISSING, "its folder is gone") if recorded is not None else RunVerdict(run_id, "")
    actual = folder_digests(run_dir)
    if recorded is not None:
        wrong = _compare(recorded, actual)
        return RunVerdict(run_id, DAMAGED, wrong) if wrong else RunVerdict(run_id, OK)
    try:
        meta: Any = json.loads((run_dir / "meta.json").read_text())
    except (OSError, ValueError):
        return RunVerdict(run_id, DAMAGED, "not in the manifest and meta.json is missing or unreadable")
    if not isinstance(meta, dict) or meta.get("run_id") != run_id or not isinstance(meta.get("files"), dict):
        return RunVerdict(run_id, DAMAGED, "not in the manifest and meta.json does not describe this run")
    wrong = _compare(meta["files"], {n: d for n, d in actual.items() if n != "meta.json"})
    return RunVerdict(run_id, DAMAGED, f"not in the manifest and {wrong}") if wrong else RunVerdict(run_id, ADOPTED)
