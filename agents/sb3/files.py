"""Saving and loading an SB3 model zip with its observation statistics (``<model>.obs_norm.npz``)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from shortcut_gym.agents.sb3.algorithms import algorithm_classes
from shortcut_gym.envs.errors import ConfigError


def norm_path(model_zip: Path) -> Path:
    """Where the observation statistics of ``model_zip`` live."""
    return model_zip.with_suffix(".obs_norm.npz")


def save_model(model: Any, obs_norm: dict[str, Any] | None, path: str | Path) -> Path:
    """Write the model zip (SB3 adds ``.zip`` when missing) and its statistics; returns the zip's path."""
    model.save(str(path))
    p = Path(path)
    p = p if p.suffix == ".zip" else p.with_suffix(".zip")
    if obs_norm is not None:
        np.savez(norm_path(p), **obs_norm)
    return p


def load_model(owner: str, algorithm: str, path: str | Path, normalize: bool) -> tuple[Any, dict[str, Any] | None]:
    """Read a model saved by :func:`save_model`: (model, statistics or None without ``normalize``);
    errors name ``owner`` and the missing file."""
    p = Path(path)
    if not p.is_file() and not p.with_suffix(".zip").is_file():
        raise ConfigError(f"{owner}: no model file at {p}")
    model = algorithm_classes()[algorithm].load(str(p), device="cpu")
    if not normalize:
        return model, None
    norm = norm_path(p if p.suffix == ".zip" else p.with_suffix(".zip"))
    if not norm.is_file():
        raise ConfigError(f"{owner}: normalize is on but {norm} (observation statistics) is missing")
    with np.load(norm) as d:
        return model, {"mean": d["mean"], "var": d["var"], "clip": float(d["clip"]), "epsilon": float(d["epsilon"])}
