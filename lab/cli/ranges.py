"""Option types (argparse ``type=``) shared by the subcommands: every range and every output path is checked by the
parser, before any work starts, and a bad value exits 2 with one line naming the option."""

from __future__ import annotations

import argparse
import math
import os
from collections.abc import Callable
from pathlib import Path

#: Largest seed accepted on the command line (numpy seeds are non-negative; 2^63 - 1 keeps
#: ``seed + users`` inside a signed 64-bit integer everywhere it is stored).
MAX_SEED = 2**63 - 1


def whole_number(lower: int, upper: int | None = None) -> Callable[[str], int]:
    """Argparse type: an integer in [lower, upper] (no upper bound when None)."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if value < lower or (upper is not None and value > upper):
            span = f">= {lower}" if upper is None else f"in {lower}..{upper}"
            raise argparse.ArgumentTypeError(f"must be a whole number {span}, got {text}")
        return value

    parse.__name__ = "whole number"
    return parse


def positive_number(text: str) -> float:
    """Argparse type: a finite number > 0."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not math.isfinite(value) or value <= 0:
        raise argparse.ArgumentTypeError(f"must be a finite number > 0, got {text}")
    return value


def seed(text: str) -> int:
    """Argparse type: a seed, a whole number in 0..2^63-1."""
    return whole_number(0, MAX_SEED)(text)


def _blocking_file(path: Path) -> Path | None:
    """The first existing non-folder on the way to ``path`` (the path itself included), if any."""
    for part in [*reversed(path.parents), path]:
        if part.exists() and not part.is_dir():
            return part
    return None


def _nearest_existing(path: Path) -> Path:
    for part in [path, *path.parents]:
        if part.exists():
            return part
    return Path(".")


def check_output_folder(path: Path) -> Path:
    """``path`` can be a folder we create or fill: no file on the way, writable; else a message."""
    path = Path(path)
    blocker = _blocking_file(path.absolute())
    if blocker is not None:
        where = "is a file" if blocker == path.absolute() else f"lies under the file {blocker}"
        raise argparse.ArgumentTypeError(f"{path} {where}, not a folder")
    if not os.access(_nearest_existing(path.absolute()), os.W_OK):
        raise argparse.ArgumentTypeError(f"{path}: no permission to write there")
    return path


def output_folder(text: str) -> Path:
    """Argparse type: an output folder (checked, not created)."""
    return check_output_folder(Path(text))


#: The word that turns an optional output folder off (``--plan-folder none``).
NO_FOLDER = "none"


def optional_output_folder(text: str) -> Path | None:
    """Argparse type: an output folder as :func:`output_folder`, or ``none`` (any case): None.
    A folder really named ``none`` is given as ``./none``."""
    if text.strip().lower() == NO_FOLDER:
        return None
    if not text.strip():
        raise argparse.ArgumentTypeError(f"an empty path; give a folder or {NO_FOLDER!r}")
    return check_output_folder(Path(text))


def output_file(text: str) -> Path:
    """Argparse type: an output file path: not a folder, its parent a folder we can create or fill."""
    path = Path(text)
    if path.is_dir():
        raise argparse.ArgumentTypeError(f"{path} is a folder, not a file")
    check_output_folder(path.parent)
    return path


def input_file(text: str) -> Path:
    """Argparse type: an existing file."""
    path = Path(text)
    if not path.is_file():
        raise argparse.ArgumentTypeError(f"{path}: no such file" if not path.exists() else f"{path} is not a file")
    return path
