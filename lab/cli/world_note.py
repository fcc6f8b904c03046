"""Which fitted models read the study's world, and the note of that world kept beside ``fits.csv``.

Learning models (Rescorla-Wagner, the choice kernel, the composed learners, the static softmax,
random) learn from the logged trials alone: their likelihood is the same in any world, so the world
options change nothing for them. Models that plan with the world (``Agent.needs_planner``:
``planned_choice``, ``bounded_optimal``) or load a model trained on one (``model_path=`` of a
tabular or SB3 agent, checked against the world it is fitted in) read it.

``fit`` and ``report`` say so on stderr and write ``world.json`` beside ``fits.csv``: the world's
words (as index.md gives them), the digest of its decision problem
(:meth:`~shortcut_gym.envs.world.World.problem_digest`) and the labels of the models that read it
and of those that read none. ``compare`` reads it back to check the world it is told against the
one the fits were made in.
"""

import argparse
import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any, NamedTuple

from shortcut_gym.agents.registry import AGENTS
from shortcut_gym.agents.world_record import WorldRecorded
from shortcut_gym.envs.world import World
from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import WORLD_OPTIONS, world_words
from shortcut_gym.lab.fitting import ModelSpec

#: The note's file name, beside fits.csv.
NOTE_NAME = "world.json"
#: Version of the note's layout.
NOTE_FORMAT = 1


def reads_world(spec: ModelSpec) -> bool:
    """True when the model's likelihood depends on the world: it plans with it, or it loads a
    trained model that is checked against it."""
    cls = AGENTS[spec.name]
    return bool(cls.needs_planner) or (issubclass(cls, WorldRecorded) and spec.options.get("model_path") is not None)


def split_readers(specs: Sequence[ModelSpec]) -> tuple[list[str], list[str]]:
    """(labels of the models that read the world, labels of those that read none), in the given order."""
    return [s.label for s in specs if reads_world(s)], [s.label for s in specs if not reads_world(s)]


def _named(specs: Sequence[ModelSpec]) -> str:
    return ", ".join(s.label if s.label == s.name else f"{s.label} ({s.name})" for s in specs)


def reading_line(specs: Sequence[ModelSpec], world_given: bool) -> str:
    """One status line naming which models read the world and which read none."""
    readers, others = [s for s in specs if reads_world(s)], [s for s in specs if not reads_world(s)]
    if not others:
        return f"world: every model reads it: {_named(readers)}"
    one = len(others) == 1
    learn = (f"{_named(others)} read{'s' if one else ''} none ({'it learns' if one else 'they learn'} from the "
             "logged trials alone)")
    if not readers:
        tail = "; the world options change no fit" if world_given else ""
        return f"world: no model reads it: {learn}{tail}"
    return f"world: read by {_named(readers)}; {learn}"


def world_given(args: argparse.Namespace) -> bool:
    """True when any world option was given on the command line."""
    return any(getattr(args, o.lstrip("-"), None) is not None for o in WORLD_OPTIONS)


def write_note(folder: Path, world: World, args: argparse.Namespace, specs: Sequence[ModelSpec]) -> Path:
    """Write ``world.json`` (the world the fits were made in) into ``folder``; returns its path."""
    readers, others = split_readers(specs)
    note = {"format": NOTE_FORMAT, "words": world_words(world, args), "problem_digest": world.problem_digest(),
            "models_reading_world": readers, "models_reading_none": others}
    path = folder / NOTE_NAME
    path.write_text(json.dumps(note, indent=2) + "\n")
    return path


class WorldNote(NamedTuple):
    """A ``world.json`` read back (:func:`read_note`)."""

    words: str
    problem_digest: str
    readers: list[str]
    others: list[str]
    path: Path



def read_note(fits: Path) -> WorldNote | None:
    """The note beside ``fits`` (None when there is none, as in folders written before notes were);
    a malformed note raises :class:`CLIError` naming it."""
    path = fits.parent / NOTE_NAME
    if not path.is_file():
        return None
    try:
        data: Any = json.loads(path.read_text())
    except (ValueError, UnicodeDecodeError) as err:
        raise CLIError(f"{path}: not a world note written by fit ({err})") from None
    need = {"format": int, "words": str, "problem_digest": str, "models_reading_world": list,
            "models_reading_none": list}
    if not isinstance(data, dict) or any(not isinstance(data.get(k), t) for k, t in need.items()):
        raise CLIError(f"{path}: a world note must hold {sorted(need)}; delete it to compare without the check")
    if data["format"] != NOTE_FORMAT:
        raise CLIError(f"{path}: world note format {data['format']}, this version reads {NOTE_FORMAT}")
    return WorldNote(data["words"], data["problem_digest"], [str(x) for x in data["models_reading_world"]],
                     [str(x) for x in data["models_reading_none"]], path)
