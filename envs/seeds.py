"""Seeds given by the user: whole numbers in 0 .. 2**63 - 1, checked where they are given.

numpy seeds are non-negative integers; 2**63 - 1 keeps every seed inside a signed 64-bit integer
wherever it is stored (the batch driver's arrays, the sweep's tables), as the command line and the
sweep specs require. A float (even 2.0), a bool or a string is refused, not truncated.
"""

from __future__ import annotations

from collections.abc import Iterable
from numbers import Integral

import numpy as np

from shortcut_gym.envs.errors import ConfigError

#: Largest seed accepted anywhere.
MAX_SEED = 2**63 - 1


def seed_fault(value: object) -> str | None:
    """Why ``value`` is not a seed, or None when it is one."""
    if isinstance(value, bool | np.bool_):
        return "is a bool, not a whole number"
    if not isinstance(value, Integral):
        return f"is not a whole number (a {type(value).__name__})"
    if int(value) < 0:
        return "is negative"
    if int(value) > MAX_SEED:
        return "exceeds 2**63 - 1"
    return None


def check_seed(value: object, where: str, argument: str = "seed") -> int:
    """``value`` as an int, or :class:`ConfigError` naming ``where``, the argument and the value."""
    fault = seed_fault(value)
    if fault is not None:
        raise ConfigError(f"{where}: {argument} = {value!r} {fault}; seeds are whole numbers in 0 .. 2**63 - 1")
    return int(value)  # type: ignore[call-overload]


def check_seeds(values: Iterable[object], where: str, argument: str = "seeds") -> list[int]:
    """Every seed of ``values`` as an int, or :class:`ConfigError` naming the first bad one by position."""
    if isinstance(values, str | bytes):
        raise ConfigError(f"{where}: {argument} must be a sequence of whole numbers, got the text {values!r}")
    try:
        items = list(values)
    except TypeError:
        raise ConfigError(f"{where}: {argument} must be a sequence of whole numbers, got "
                          f"{type(values).__name__}") from None
    return [check_seed(v, where, f"{argument}[{i}]") for i, v in enumerate(items)]
