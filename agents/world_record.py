"""The record of the world a saved model was trained on, and the check of it against the world of use.

A trained model (a tabular Q table, an SB3 policy) fits one world: the same command count and
horizon but other costs, memory settings, commands or schedule make another decision problem, on
which the model's numbers mean nothing. So every saved model keeps a *world record* (JSON):
``format``, the digest of the decision problem the world poses
(:meth:`~shortcut_gym.envs.world.World.problem_digest`: the command set, costs, memory, the
schedule in force, observation options and interface aids, as the simulator reads them, so a
preset and the same values written out agree), the digest of each of those parts, and a short
description (scenario name, command count, horizon).

On use, :class:`WorldRecorded` agents compare the record with the world they are bound to (or run
on) and raise :class:`~shortcut_gym.envs.errors.WorldMismatchError` in one line naming the file,
both worlds and the parts that differ. A file written before records existed holds none and is
refused the same way. The option ``allow_other_world=true`` lets either run, with a warning on the
``shortcut_gym`` logger once per model file and world in a process (however many agents are built
from the file for that world, as a sweep's run builds one to prepare and one to simulate).
"""

from __future__ import annotations

import json
import logging
import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from shortcut_gym.envs.errors import ConfigError, DataError, WorldMismatchError
from shortcut_gym.envs.world import World

#: Version of the record's layout.
RECORD_FORMAT = 1
#: The agent option that lets a model run on a world other than its own.
OVERRIDE = "allow_other_world"
#: The advice ending a mismatch message (a caller whose worlds differ by design replaces it).
RETRAIN_ADVICE = f"retrain it on this world, or give {OVERRIDE}=true to use it anyway"
#: What each part of a world is called in messages.
PART_NAMES = {"commands": "scenario commands", "costs": "costs", "memory": "memory", "schedule": "schedule",
              "observation": "observation options", "aids": "interface aids"}
#: The part names of :data:`PART_NAMES` that are singular nouns (they take "differs" alone).
SINGULAR_PARTS = frozenset({"memory", "schedule"})

log = logging.getLogger(__name__)

#: (owner, model path, trained digest, used digest) already warned about in this process.
_WARNED: set[tuple[str, str | None, str | None, str]] = set()


@contextmanager
def atomic_path(path: Path) -> Iterator[Path]:
    """A temporary path beside ``path`` to write; moved onto ``path`` in one step when the block
    succeeds, removed when it fails (so a reader never sees a half-written model file)."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def world_record(world: World) -> dict[str, Any]:
    """The record of ``world`` a saved model keeps (JSON-ready)."""
    return {"format": RECORD_FORMAT, "digest": world.problem_digest(), "parts": world.problem_parts(),
            "scenario": world.scenario.name, "n_commands": int(world.commands.n_commands),
            "horizon": int(world.horizon)}


def describe(record: dict[str, Any]) -> str:
    """One-line description, e.g. ``'tidepool_logbook' (12 commands, 40 trials, world 33c7c08b179a)``."""
    return (f"{record['scenario']!r} ({record['n_commands']} commands, {record['horizon']} trials, "
            f"world {record['digest'][:12]})")


def differing_parts(trained: dict[str, Any], used: dict[str, Any]) -> list[str]:
    """Names of the parts whose digests differ (all of them when the record lists none)."""
    a, b = trained.get("parts") or {}, used["parts"]
    return [PART_NAMES.get(n, n) for n in b if a.get(n) != b[n]]


def parts_differ(parts: list[str]) -> str:
    """The differing parts in words with the verb agreeing: ``memory differs``, ``costs differ``,
    ``costs and memory differ``, ``costs, memory and schedule differ``; none: ``their contents differ``."""
    if not parts:
        return "their contents differ"
    if len(parts) == 1:
        return f"{parts[0]} {'differs' if parts[0] in SINGULAR_PARTS else 'differ'}"
    return f"{', '.join(parts[:-1])} and {parts[-1]} differ"


def record_text(world: World) -> str:
    """The record of ``world`` as JSON text."""
    return json.dumps(world_record(world), sort_keys=True)


def parse_record(text: str, where: str) -> dict[str, Any]:
    """A record read back from a model file; :class:`DataError` naming ``where`` when it is malformed."""
    try:
        record = json.loads(text)
    except ValueError as err:
        raise DataError(f"{where}: the world record is not JSON ({err})") from None
    need = {"format": int, "digest": str, "parts": dict, "scenario": str, "n_commands": int, "horizon": int}
    if not isinstance(record, dict) or any(not isinstance(record.get(k), t) for k, t in need.items()):
        raise DataError(f"{where}: the world record must hold {sorted(need)}, got {record!r}")
    if record["format"] != RECORD_FORMAT:
        raise DataError(f"{where}: world record format {record['format']}, this version reads {RECORD_FORMAT}")
    return record


def check_flag(owner: str, value: Any) -> bool:
    """``allow_other_world`` checked to be a boolean."""
    if not isinstance(value, bool):
        raise ConfigError(f"{owner}: {OVERRIDE} must be true or false, got {value!r}")
    return value


def check_model_world(owner: str, path: str | None, record: dict[str, Any] | None, world: World,
                      allow_other_world: bool) -> None:
    """Refuse (or, with ``allow_other_world``, warn about) a model whose record is not ``world``'s.

    ``record`` None: the file keeps no record (saved before records existed)."""
    used = world_record(world)
    if record is not None and record["digest"] == used["digest"]:
        return
    where = f"the model {path}" if path else "the model"
    if record is None:
        message = (f"{owner}: {where} keeps no record of the world it was trained on (saved by a version "
                   f"before world records), so it cannot be checked against this world {describe(used)}")
    else:
        parts = differing_parts(record, used)
        message = (f"{owner}: {where} was trained on the world {describe(record)}, not on this world "
                   f"{describe(used)} ({parts_differ(parts)})")
    if allow_other_world:
        key = (owner, path, None if record is None else record["digest"], used["digest"])
        if key not in _WARNED:
            _WARNED.add(key)
            log.warning("%s; used anyway as %s=true", message, OVERRIDE)
        return
    raise WorldMismatchError(f"{message}; {RETRAIN_ADVICE}")


class WorldRecorded:
    """Mixin of agents whose saved model keeps a world record.

    ``trained_for`` is the record (None: no model yet, or a file without one, see ``has_model``);
    :meth:`check_world` compares it with a world once per world object.
    """

    name: str
    model_path: str | None
    trained_for: dict[str, Any] | None = None
    allow_other_world: bool = False
    _checked: World | None = None

    def has_model(self) -> bool:
        """True once a model was trained or loaded (subclasses say how)."""
        raise NotImplementedError

    def check_world(self, world: World | None) -> None:
        """Refuse a loaded or trained model on a world it was not trained on (see the module)."""
        if world is None or not self.has_model() or world is self._checked:
            return
        check_model_world(self.name, self.model_path, self.trained_for, world, self.allow_other_world)
        self._checked = world

    def adopt_record(self, record: dict[str, Any] | None, path: str, world: World | None) -> None:
        """Keep the record of a model read from ``path``, checked first against the bound ``world`` (if any)."""
        if world is not None:
            check_model_world(self.name, path, record, world, self.allow_other_world)
        self.trained_for, self._checked = record, world

    def trained_on(self, world: World) -> None:
        """Note that the model was (last) trained on ``world``."""
        self.trained_for = world_record(world)
        self._checked = world

    def record_to_save(self, context_world: World | None) -> dict[str, Any]:
        """The record a save writes: the training world's, else the bound world's."""
        if self.trained_for is not None:
            return self.trained_for
        if context_world is not None:
            return world_record(context_world)
        raise ConfigError(f"{self.name}: the model has no record of the world it was trained on; bind it to a "
                          "world (agents.rollout.context_of(env)) before saving")
