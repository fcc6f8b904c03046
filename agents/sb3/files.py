"""Saving and loading an SB3 model zip with its observation statistics (``<model>.obs_norm.npz``)
and the record of the world it was trained on.

The world record (:mod:`shortcut_gym.agents.world_record`) is one more member of the model's own
zip, :data:`RECORD_MEMBER` (JSON), so it travels with the model; SB3's loader reads only its own
members and ignores it. Both files are written to temporary names and moved into place, so a
reader never sees a half-written or unrecorded model.
"""

from __future__ import annotations

import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from shortcut_gym.agents.sb3.algorithms import algorithm_classes
from shortcut_gym.agents.world_record import atomic_path, parse_record
from shortcut_gym.envs.errors import ConfigError, DataError

#: The zip member holding the world record.
RECORD_MEMBER = "shortcut_gym_world.json"


def norm_path(model_zip: Path) -> Path:
    """Where the observation statistics of ``model_zip`` live."""
    return model_zip.with_suffix(".obs_norm.npz")


def save_model(model: Any, obs_norm: dict[str, Any] | None, path: str | Path, record_text: str) -> Path:
    """Write the model zip (``.zip`` added when missing) with the world record ``record_text`` (JSON)
    as :data:`RECORD_MEMBER`, and its statistics; returns the zip's path."""
    p = Path(path)
    p = p if p.suffix == ".zip" else p.with_suffix(".zip")
    if obs_norm is not None:
        with atomic_path(norm_path(p)) as tmp, open(tmp, "wb") as f:
            np.savez(f, **obs_norm)
    with atomic_path(p) as tmp:
        with open(tmp, "wb") as f:  # a file object: SB3 writes it as it is, adding no suffix
            model.save(f)
        with zipfile.ZipFile(tmp, "a") as z:
            z.writestr(RECORD_MEMBER, record_text)
    return p


def read_record(owner: str, path: Path) -> dict[str, Any] | None:
    """The world record of a model zip, None when the zip keeps none (saved before records)."""
    try:
        with zipfile.ZipFile(path) as z:
            if RECORD_MEMBER not in z.namelist():
                return None
            text = z.read(RECORD_MEMBER).decode()
    except (OSError, zipfile.BadZipFile, UnicodeDecodeError) as err:
        raise DataError(f"{owner}: {path} is not a model zip written by save ({err})") from None
    return parse_record(text, f"{owner}: {path}")


def load_model(owner: str, algorithm: str, path: str | Path,
               normalize: bool) -> tuple[Any, dict[str, Any] | None, dict[str, Any] | None]:
    """Read a model saved by :func:`save_model`: (model, statistics or None without ``normalize``,
    world record or None when the file keeps none); errors name ``owner`` and the missing file."""
    p = Path(path)
    if not p.is_file() and not p.with_suffix(".zip").is_file():
        raise ConfigError(f"{owner}: no model file at {p}")
    zip_path = p if p.is_file() else p.with_suffix(".zip")
    record = read_record(owner, zip_path)
    model = algorithm_classes()[algorithm].load(str(zip_path), device="cpu")
    if not normalize:
        return model, None, record
    norm = norm_path(zip_path if zip_path.suffix == ".zip" else zip_path.with_suffix(".zip"))
    if not norm.is_file():
        raise ConfigError(f"{owner}: normalize is on but {norm} (observation statistics) is missing")
    with np.load(norm) as d:
        return model, {"mean": d["mean"], "var": d["var"], "clip": float(d["clip"]),
                       "epsilon": float(d["epsilon"])}, record
