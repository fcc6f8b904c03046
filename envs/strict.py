"""The base of every settings model: unknown keys refused, finite numbers only, no bool as a number.

pydantic's lax mode reads ``true`` as 1 for a number field and accepts ``.inf``/``.nan``; both
hide mistakes in a config file, so every settings model derives from :class:`StrictModel`.
"""

from __future__ import annotations

import types
import typing
from typing import Any

from pydantic import BaseModel, ConfigDict, model_validator


def _takes_bool(annotation: Any) -> bool:
    if annotation is bool or annotation is Any:
        return True
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType):
        return any(_takes_bool(a) for a in typing.get_args(annotation))
    return False


class StrictModel(BaseModel):
    """Frozen, no extra keys, finite floats, and booleans only where a field is a boolean."""

    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)

    @model_validator(mode="before")
    @classmethod
    def _no_bool_as_number(cls, data: Any) -> Any:
        if isinstance(data, dict):
            for name, value in data.items():
                field = cls.model_fields.get(name)
                if field is not None and isinstance(value, bool) and not _takes_bool(field.annotation):
                    raise ValueError(f"{name}: expected a {_kind(field.annotation)}, got the boolean {value!r}")
        return data


def _kind(annotation: Any) -> str:
    text = getattr(annotation, "__name__", None) or str(annotation)
    return {"float": "number", "int": "whole number", "str": "text"}.get(text, f"value of type {text}")
