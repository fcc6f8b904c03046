"""Saving and loading an SB3 model zip with its observation statistics (``<model>.obs_norm.npz``)
and the record of the world it was trained on.

The record also tells whether the model was trained on normalised observations
(:data:`NORMALIZED_KEY`): loading with ``normalize`` set the other way is refused, so statistics
lying beside a model trained without them (left there by another training run) are never applied.
The world record (:mod:`shortcut_gym.agents.world_record`) is one more member of the model's own
zip, :data:`RECORD_MEMBER` (JSON), so it travels with the model; SB3's loader reads only its own
members and ignores it. The record's ``algorithm`` entry names the SB3 algorithm, so a zip given
to another adapter (or a file of another kind: a Q table, a zip without a model) is refused in one
line saying what it holds (:mod:`shortcut_gym.agents.model_files`) before SB3 reads it. Both files
are written to temporary names and moved into place, so a reader never sees a half-written or
unrecorded model.
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from shortcut_gym.agents.model_files import (
    ALGORITHM_KEY,
    RECORD_MEMBER,
    file_contents,
    hint_for,
    model_file_path,
    sb3_title,
    with_article,
)
from shortcut_gym.agents.sb3.algorithms import algorithm_classes
from shortcut_gym.agents.world_record import atomic_path, parse_record
from shortcut_gym.envs.errors import ConfigError, DataError

__all__ = ["NORMALIZED_KEY", "RECORD_MEMBER", "load_model", "norm_path", "read_record", "save_model"]


#: The record's entry telling whether the model was trained on normalised observations (true: its
#: statistics are the ``.obs_norm.npz`` written beside it with it); a zip saved before the entry
#: existed keeps none, and is read as it was then.
NORMALIZED_KEY = "observations_normalized"


def norm_path(model_zip: Path) -> Path:
    """Where the observation statistics of ``model_zip`` live."""
    return model_zip.with_suffix(".obs_norm.npz")


def save_model(model: Any, obs_norm: dict[str, Any] | None, path: str | Path, record_text: str,
               algorithm: str) -> Path:
    """Write the model zip (``.zip`` added when missing) with the world record ``record_text`` (JSON)
    and the ``algorithm`` name as :data:`RECORD_MEMBER`, and its statistics; returns the zip's path."""
    member = json.dumps({**json.loads(record_text), ALGORITHM_KEY: algorithm, NORMALIZED_KEY: obs_norm is not None},
                        sort_keys=True)
    p = Path(path)
    p = p if p.suffix == ".zip" else p.with_suffix(".zip")
    if obs_norm is not None:
        with atomic_path(norm_path(p)) as tmp, open(tmp, "wb") as f:
            np.savez(f, **obs_norm)
    with atomic_path(p) as tmp:
        with open(tmp, "wb") as f:  # a file object: SB3 writes it as it is, adding no suffix
            model.save(f)
        with zipfile.ZipFile(tmp, "a") as z:
            z.writestr(RECORD_MEMBER, member)
    return p


def _read_member(owner: str, path: Path) -> dict[str, Any] | None:
    """The whole record member of a model zip (world record and the model's own entries), None when
    the zip keeps none (saved before records)."""
    try:
        with zipfile.ZipFile(path) as z:
            if RECORD_MEMBER not in z.namelist():
                return None
            text = z.read(RECORD_MEMBER).decode()
    except (OSError, zipfile.BadZipFile, UnicodeDecodeError) as err:
        raise DataError(f"{owner}: {path} is not a model zip written by save ({err})") from None
    return parse_record(text, f"{owner}: {path}")


def _model_entries(record: dict[str, Any]) -> dict[str, Any]:
    """Take the model's own entries (algorithm, normalisation) out of ``record``, leaving the world's."""
    return {key: record.pop(key) for key in (ALGORITHM_KEY, NORMALIZED_KEY) if key in record}


def read_record(owner: str, path: Path) -> dict[str, Any] | None:
    """The world record of a model zip, None when the zip keeps none (saved before records)."""
    record = _read_member(owner, path)
    if record is not None:
        _model_entries(record)
    return record


def check_normalization(owner: str, zip_path: Path, trained: Any, normalize: bool) -> None:
    """Refuse loading with ``normalize`` set the other way from the training of the model (``trained``:
    the record's :data:`NORMALIZED_KEY`; None, a zip saved before the entry, is not checked)."""
    if trained is None or trained is normalize:
        return
    if not isinstance(trained, bool):
        raise DataError(f"{owner}: {zip_path}: the record's {NORMALIZED_KEY} must be true or false, got {trained!r}")
    norm = norm_path(zip_path)
    if normalize:
        stray = (f"; {norm} beside it holds observation statistics of another training run, which are not read"
                 if norm.is_file() else "")
        raise ConfigError(f"{owner}: {zip_path} was trained without observation normalisation, but normalize is "
                          f"on: load it with normalize=false{stray}")
    raise ConfigError(f"{owner}: {zip_path} was trained on normalised observations (its statistics: {norm}), but "
                      "normalize is off: leave normalize on (the policy learned on normalised observations)")


def load_model(owner: str, algorithm: str, path: str | Path,
               normalize: bool) -> tuple[Any, dict[str, Any] | None, dict[str, Any] | None]:
    """Read a model saved by :func:`save_model`: (model, statistics or None without ``normalize``,
    world record or None when the file keeps none); errors name ``owner`` and the missing file."""
    p = Path(path)
    zip_path = p if p.is_file() or p.suffix else model_file_path(owner, p, ".zip")  # as save names it
    if not zip_path.is_file():
        raise ConfigError(f"{owner}: no model file at {p}")
    held = file_contents(zip_path)
    asked = with_article(f"{sb3_title(algorithm)} model")
    if held.kind != "sb3" or (held.name is not None and held.name != algorithm):
        raise DataError(f"{owner}: {zip_path} holds {held.description}, not {asked}"
                        f"{hint_for(held, zip_path)}")
    record = _read_member(owner, zip_path)
    trained = _model_entries(record).get(NORMALIZED_KEY) if record is not None else None
    check_normalization(owner, zip_path, trained, normalize)
    cls = algorithm_classes()[algorithm]
    try:
        model = cls.load(str(zip_path), device="cpu")
    except (AssertionError, AttributeError, KeyError, ValueError, TypeError, RuntimeError, EOFError,
            zipfile.BadZipFile) as err:  # a zip of an untold algorithm, or one damaged
        raise DataError(f"{owner}: {zip_path} holds {held.description}, which stable_baselines3.{cls.__name__} "
                        f"could not read ({type(err).__name__}: {err}); is it {asked} written by save?") from None
    if not normalize:
        return model, None, record
    norm = norm_path(zip_path if zip_path.suffix == ".zip" else zip_path.with_suffix(".zip"))
    if not norm.is_file():
        raise ConfigError(f"{owner}: normalize is on but {norm} (observation statistics) is missing")
    with np.load(norm) as d:
        return model, {"mean": d["mean"], "var": d["var"], "clip": float(d["clip"]),
                       "epsilon": float(d["epsilon"])}, record
