"""The one owner of the observation vector's layout: names, offsets, length and bounds.

An observation is a flat float32 vector: the target block (a one-hot over the commands, or one
entry ``target / (n_commands - 1)`` with the index encoding), then :data:`FEATURES` in order, then
the true recall probability when the world exposes it. The compiled kernel writes it with the
offsets below (:data:`X_EXPOSURES` ... :data:`X_RECALL`, counted from the end of the target
block) and :func:`write_target` (which also serves plain Python); :class:`ObservationLayout` gives
the same layout to everyone else (the world's names and
length, the env's ``observation_space``, agents locating a feature, the lab rebuilding
observations from a trial log).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from gymnasium import spaces
from numba.extending import register_jitable

from shortcut_gym.envs.errors import ConfigError, DataError

#: Features after the target block, in order (times in seconds before the log1p).
FEATURES: tuple[str, ...] = (
    "log1p_exposures",
    "log1p_seconds_since_last_use",
    "log1p_hotkey_successes",
    "log1p_hotkey_failures",
    "log1p_learn_count",
    "hand_on_keyboard",
    "horizon_left_fraction",
)
#: The optional last entry (the world's ``observe_recall``).
RECALL_FEATURE = "recall_probability"
#: Offsets of each feature from the end of the target block (used by the compiled kernel).
(X_EXPOSURES, X_SINCE_LAST_USE, X_HOTKEY_SUCCESSES, X_HOTKEY_FAILURES, X_LEARN_COUNT, X_HAND_ON_KEYBOARD,
 X_HORIZON_LEFT, X_RECALL) = range(8)
#: Upper bound of the log1p features (log1p of ~30 years in seconds; assumption of this project).
LOG_FEATURE_HIGH = 25.0
#: Features bounded by 1 (a flag, a fraction, a probability); every other feature is a log1p.
_UNIT_FEATURES = frozenset({"hand_on_keyboard", "horizon_left_fraction", RECALL_FEATURE})


@register_jitable
def target_block_size(n_commands: int, onehot: bool) -> int:
    """Entries of the target block: ``n_commands`` one-hot, 1 as an index entry."""
    return n_commands if onehot else 1


@register_jitable
def write_target(obs: np.ndarray, command: int, n_commands: int, onehot: bool) -> int:
    """Write ``command``'s target block at the start of ``obs`` (zeros there before): a one-hot
    entry, or ``command / (n_commands - 1)`` with the index encoding. Returns the block's size,
    where :data:`FEATURES` start. Callable from compiled code (the kernel) and plain Python."""
    if onehot:
        obs[command] = 1.0
    else:
        obs[0] = command / max(n_commands - 1, 1)
    return target_block_size(n_commands, onehot)


@dataclass(frozen=True)
class ObservationLayout:
    """The observation layout of a world with ``n_commands`` commands.

    ``onehot``: the target as a one-hot block (else one index entry); ``observe_recall``: the
    true recall probability is the last entry.
    """

    n_commands: int
    onehot: bool = True
    observe_recall: bool = False

    def __post_init__(self) -> None:
        if int(self.n_commands) != self.n_commands or self.n_commands < 1:
            raise ConfigError(f"an observation layout needs n_commands >= 1, got {self.n_commands!r}")

    @property
    def target_size(self) -> int:
        """Entries of the target block (:func:`target_block_size`)."""
        return target_block_size(self.n_commands, self.onehot)

    @property
    def dim(self) -> int:
        """Length of the observation vector."""
        return self.target_size + len(FEATURES) + (1 if self.observe_recall else 0)

    def feature_names(self) -> list[str]:
        """Names of the entries after the target block."""
        return list(FEATURES) + ([RECALL_FEATURE] if self.observe_recall else [])

    def names(self, command_names: Sequence[str] | None = None) -> list[str]:
        """Name of each entry: ``target=<command>`` (one-hot; command indices without names) or
        ``target_index_fraction``, then :meth:`feature_names`."""
        if self.onehot:
            labels = list(command_names) if command_names is not None else [str(i) for i in range(self.n_commands)]
            if len(labels) != self.n_commands:
                raise ConfigError(f"{len(labels)} command names for a layout of {self.n_commands} commands")
            target = [f"target={n}" for n in labels]
        else:
            target = ["target_index_fraction"]
        return target + self.feature_names()

    def index(self, feature: str) -> int:
        """Position of a feature (a name of :meth:`feature_names`) in the vector."""
        names = self.feature_names()
        if feature not in names:
            raise ConfigError(f"observation feature {feature!r} is not in this layout; features: {names}")
        return self.target_size + names.index(feature)

    def high(self) -> np.ndarray:
        """Upper bound of each entry (float32): 1 for the target block and the unit features,
        :data:`LOG_FEATURE_HIGH` for the log1p features; every lower bound is 0."""
        bounds = [1.0] * self.target_size
        bounds += [1.0 if f in _UNIT_FEATURES else LOG_FEATURE_HIGH for f in self.feature_names()]
        return np.asarray(bounds, dtype=np.float32)

    def space(self) -> spaces.Box:
        """The Gymnasium ``Box`` of this layout."""
        return spaces.Box(0.0, self.high(), dtype=np.float32)


def layout_of_length(n_commands: int, dim: int) -> ObservationLayout:
    """The one layout of ``n_commands`` commands whose vector has ``dim`` entries; raises when
    none or several fit (then name the entries, e.g. through an agent context's ``obs_names``)."""
    fits: dict[int, ObservationLayout] = {}  # by target block size (one command: both encodings agree)
    for onehot in (True, False):
        for recall in (False, True):
            layout = ObservationLayout(n_commands, onehot, recall)
            if layout.dim == dim:
                fits.setdefault(layout.target_size, layout)
    if len(fits) != 1:
        raise ConfigError(f"cannot tell the observation layout of {dim} entries for {n_commands} commands "
                          f"({len(fits)} layouts fit); give the observation names")
    return next(iter(fits.values()))


def feature_index(feature: str, dim: int, n_commands: int, names: Sequence[str] = ()) -> int:
    """Position of ``feature`` in an observation of ``dim`` entries: from ``names`` when given
    (one name per entry), else from the one layout of that length (:func:`layout_of_length`)."""
    if names:
        if len(names) != dim:
            raise DataError(f"observation has {dim} entries, the names given are {len(names)}")
        if feature not in names:
            raise ConfigError(f"observation feature {feature!r} is not among the names given")
        return list(names).index(feature)
    return layout_of_length(n_commands, dim).index(feature)
