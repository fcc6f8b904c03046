"""What a saved model file holds, read without loading it, so a file of the wrong kind is refused in
one line naming the file, what it holds and what was asked.

Two kinds of file are written by this package: an SB3 model zip (:mod:`shortcut_gym.agents.sb3.files`:
SB3's own members plus :data:`RECORD_MEMBER`, whose ``algorithm`` entry names the algorithm) and a
tabular Q table (:mod:`shortcut_gym.agents.tabular`: an .npz, itself a zip of ``.npy`` members,
with ``name`` naming the agent). A zip written by an earlier version keeps no ``algorithm``; its
algorithm is then told from the settings SB3 writes in its ``data`` member (JSON): DQN keeps an
``exploration_rate``, PPO ``n_epochs`` and ``clip_range``, A2C neither but ``vf_coef``.
"""

from __future__ import annotations

import json
import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from shortcut_gym.envs.errors import ConfigError

#: The zip member of an SB3 model zip holding the world record (and the algorithm's name).
RECORD_MEMBER = "shortcut_gym_world.json"
#: The record's entry naming the SB3 algorithm of the zip.
ALGORITHM_KEY = "algorithm"
#: SB3 algorithms this package saves, as written in messages.
SB3_TITLES = {"ppo": "PPO", "a2c": "A2C", "dqn": "DQN"}
#: At most this many member names are listed in a message.
MAX_LISTED = 6


@dataclass(frozen=True)
class Contents:
    """What a model file holds: ``kind`` is ``"sb3"`` (an SB3 model zip), ``"table"`` (a Q table
    .npz) or ``"other"`` (neither); ``name`` the algorithm or agent when known (``"ppo"``,
    ``"q_learning"``, ...); ``description`` a phrase for messages ("a PPO model")."""

    kind: str
    name: str | None
    description: str


def _listed(names: list[str]) -> str:
    shown = ", ".join(names[:MAX_LISTED])
    return shown + (f" and {len(names) - MAX_LISTED} more" if len(names) > MAX_LISTED else "") if names else "none"


def with_article(phrase: str) -> str:
    """``'an A2C model'``, ``'a PPO model'``: the phrase after its indefinite article."""
    return f"a{'n' if phrase[:1].upper() in 'AEIOU' else ''} {phrase}"


def sb3_title(name: str | None) -> str:
    """``'PPO'`` for ``'ppo'``; the name itself for one this package does not save."""
    return SB3_TITLES.get(name or "", name or "SB3")


def algorithm_from_data(text: str) -> str | None:
    """The SB3 algorithm whose settings SB3's ``data`` member ``text`` (JSON) holds; None when unclear."""
    try:
        data = json.loads(text)
    except ValueError:
        return None
    if not isinstance(data, dict):
        return None
    if "exploration_rate" in data:
        return "dqn"
    if "n_epochs" in data and "clip_range" in data:
        return "ppo"
    if "vf_coef" in data and "n_steps" in data:
        return "a2c"
    return None


def _sb3_contents(z: zipfile.ZipFile) -> Contents:
    name = None
    if RECORD_MEMBER in z.namelist():
        try:
            record = json.loads(z.read(RECORD_MEMBER).decode())
            name = record.get(ALGORITHM_KEY) if isinstance(record, dict) else None
        except (ValueError, UnicodeDecodeError):
            name = None
    if not isinstance(name, str):
        try:
            name = algorithm_from_data(z.read("data").decode())
        except UnicodeDecodeError:
            name = None
    if name is None:
        return Contents("sb3", None, "an SB3 model of an algorithm it does not record")
    return Contents("sb3", name, with_article(f"{sb3_title(name)} model"))


def _table_contents(path: Path) -> Contents:
    try:
        with np.load(path, allow_pickle=False) as d:
            files = list(d.files)
            name = str(d["name"]) if "name" in files and d["name"].ndim == 0 else None
            has_q = "q" in files
    except (OSError, ValueError, KeyError, zipfile.BadZipFile) as err:
        return Contents("other", None, f"no Q table (its arrays cannot be read: {err})")
    if not has_q or name is None:
        return Contents("other", None, f"no Q table (an .npz with the arrays {_listed(files)})")
    return Contents("table", name, f"a {name} Q table")


def file_contents(path: str | Path) -> Contents:
    """What the file at ``path`` (an existing file) holds, read from its zip members only."""
    p = Path(path)
    try:
        with zipfile.ZipFile(p) as z:
            members = z.namelist()
            if "data" in members and any(m.endswith(".pth") for m in members):
                return _sb3_contents(z)
    except zipfile.BadZipFile:
        return Contents("other", None, "no model (it is not a zip file, as SB3 models and Q tables are)")
    except OSError as err:
        return Contents("other", None, f"no model (it cannot be read: {err})")
    if members and all(m.endswith(".npy") for m in members):
        return _table_contents(p)
    return Contents("other", None, f"no model (a zip with the members {_listed(members)})")


def hint_for(contents: Contents, path: str | Path) -> str:
    """``' (load it with ppo:model_path=FILE)'`` when the file holds a model of a known agent, else ``''``."""
    if contents.kind in ("sb3", "table") and contents.name:
        return f" (load it with {contents.name}:model_path={path})"
    return ""


def model_file_path(owner: str, path: str | Path, suffix: str) -> Path:
    """The file a model of ``owner`` is saved to or read from for ``path``: ``path`` itself when it
    ends in ``suffix`` (``".zip"``, ``".npz"``), ``path`` with ``suffix`` added when it has none; any
    other suffix is refused naming the path (a silent swap would write ``run.v2`` as ``run.zip``)."""
    p = Path(path)
    if p.suffix == suffix:
        return p
    if p.suffix == "" or p.name.endswith("."):
        return p.with_name(p.name.rstrip(".") + suffix)
    raise ConfigError(f"{owner}: the model file {p} must end in {suffix} (its suffix is {p.suffix!r}); give "
                      f"{p.name}{suffix} or a name without a suffix, to which {suffix} is added")
