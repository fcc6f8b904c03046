"""``shortcut-gym audit``: check a sweep folder against its manifest's digests, computing nothing.

Exit 0 when every finished run is intact, 1 when a finished run is missing or damaged, a stray
run folder is present or a loose file in ``runs/`` belongs to no run (each named), 2 when the
folder is not a sweep folder.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import detail


def _folder(text: str) -> Path:
    path = Path(text)
    if not path.is_dir():
        raise argparse.ArgumentTypeError(f"{path}: no such folder")
    return path


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``audit`` subcommand."""
    p = sub.add_parser("audit", help="check a sweep folder's finished runs against their digests (computes nothing)")
    p.add_argument("folder", type=_folder, help="a sweep folder written by 'shortcut-gym sweep'")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Print the check; 0 intact, 1 faults found."""
    from shortcut_gym.lab.sweep.lock import FolderLock, describe_holder
    from shortcut_gym.lab.sweep.store import SweepStore

    store = SweepStore(args.folder)
    if not store.manifest_path.is_file():
        raise CLIError(f"{args.folder}: not a sweep folder (no manifest.json)")
    detail(f"checking {args.folder} against {store.manifest_path}")
    check = store.check()
    lines = check.lines()
    holder = FolderLock(args.folder).read_holder()
    if holder.get("pid") is not None:
        lines.append(f"  note: the lock file names {describe_holder(holder)} (a sweep may be writing now)")
    failed = store.failed_ids()
    if failed:
        lines.append(f"  {len(failed)} run(s) recorded as failed (see runs/*.failed.json)")
    print("\n".join(lines))
    return 0 if check.intact else 1
