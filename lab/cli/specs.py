"""The one agent-spec syntax of the command line: ``[label=]name[:key=value,key=value,...]``.

Used by every option that names an agent or a model (``--agent``, ``--model``). The parser is
generic: it knows nothing of particular agents. Each value is read as a YAML scalar, so numbers
(``0.5``, ``1e-3``, ``3``), booleans (``true``, ``no``), strings and paths (``out/ppo.zip``) all
work, and so do lists, written one way only: a YAML flow list ``[a, b]`` (one item: ``[a]``;
commas inside brackets or quotes do not split items). Unquoted text joining items with ``+``
(``value+lapse``) is refused with the bracket form to use: ``+`` is part of hotkey names and of
numbers (``1e+3`` stays a number), so it is no list separator. Quote a value (``'a+b'``,
``'true'``) to keep it as text. ``null``/``~`` and mappings are refused: give a value, or leave
the key out for the default (for ``--agent``, the refusal of a mapping says to give nested values,
such as an SB3 agent's ``policy_kwargs``, in an ``--agent-file`` instead). In a shell, quote the
whole spec (``--model 'm=x:k=[a, b]'``): the brackets are a glob pattern and the space would split
the word.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from shortcut_gym.envs.config import parse_yaml
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.cli import CLIError

SYNTAX = "[label=]name[:key=value,...]"
#: What the refusal of a mapping in an ``--agent`` value adds.
AGENT_NESTED_HINT = ("; nested values such as policy_kwargs go in a spec file, --agent-file FILE.yaml, "
                     "under hyperparameters: (docs/configs.md, Agent spec)")


@dataclass(frozen=True)
class SpecText:
    """A parsed spec: optional ``label``, the ``name`` and the ``key=value`` pairs in order."""

    name: str
    label: str | None = None
    values: dict[str, Any] = field(default_factory=dict)


def split_items(text: str, where: str) -> list[str]:
    """Split on commas that are outside brackets and quotes; unbalanced ones raise naming ``where``."""
    items, depth, quote, start = [], 0, "", 0
    for i, ch in enumerate(text):
        if quote:
            quote = "" if ch == quote else quote
        elif ch in "'\"":
            quote = ch
        elif ch in "[{":
            depth += 1
        elif ch in "]}":
            depth -= 1
            if depth < 0:
                raise CLIError(f"{where}: unbalanced {ch!r}")
        elif ch == "," and depth == 0:
            items.append(text[start:i])
            start = i + 1
    if quote or depth:
        raise CLIError(f"{where}: unclosed {quote or 'bracket'}")
    items.append(text[start:])
    return [item.strip() for item in items if item.strip()]


def _scalar(text: str, where: str, nested: str = "") -> Any:
    try:
        value = parse_yaml(text, where)
    except ConfigError as err:
        raise CLIError(str(err)) from None
    if value is None:
        raise CLIError(f"{where}: no value (leave the key out to keep the default)")
    if isinstance(value, dict):
        raise CLIError(f"{where}: a value is a number, boolean, text or list, not a mapping ({text!r}){nested}")
    return value


def parse_value(text: str, where: str = "value", nested: str = "") -> Any:
    """One value read as a YAML scalar or flow list ``[a, b]``; unquoted ``a+b`` text is refused;
    ``nested`` ends the refusal of a mapping (where to give one instead)."""
    text = text.strip()
    if not text:
        raise CLIError(f"{where}: empty value")
    value = _scalar(text, where, nested)
    if isinstance(value, str) and "+" in value and text[0] not in "'\"":
        items = ", ".join(part.strip() for part in value.split("+") if part.strip())
        raise CLIError(f"{where}: {text!r} joins items with '+'; a list is written in square brackets, "
                       f"[{items}] (quote the value, '{text}', to keep it as text)")
    return value


def parse_spec(text: str, what: str = "agent", nested: str = "") -> SpecText:
    """``[label=]name[:key=value,...]`` -> :class:`SpecText`; faults name ``what`` and the text
    (``nested``: see :func:`parse_value`)."""
    where = f"{what} {text!r}"
    head, colon, rest = text.partition(":")
    label, eq, name = head.partition("=")
    if not eq:
        label, name = "", head
    name, label = name.strip(), label.strip()
    if not name:
        raise CLIError(f"{where}: missing the name (syntax {SYNTAX})")
    if eq and not label:
        raise CLIError(f"{where}: empty label before '=' (syntax {SYNTAX})")
    values: dict[str, Any] = {}
    for item in split_items(rest, where) if colon else []:
        key, eq2, value = item.partition("=")
        key = key.strip()
        if not eq2 or not key:
            raise CLIError(f"{where}: {item!r} must look like key=value")
        if key in values:
            raise CLIError(f"{where}: key {key!r} is given twice")
        values[key] = parse_value(value, f"{where}: {key}", nested)
    return SpecText(name, label or None, values)


def is_number(value: Any) -> bool:
    """A number value (int or float, not a boolean)."""
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def agent_spec_dict(text: str) -> dict[str, Any]:
    """``--agent`` text -> the agent spec dict the registry builds from.

    Numbers go under ``params``, other values beside them as options; the registry passes both to
    the agent, which tells its parameters from its options (a numeric option works either way; an
    SB3 agent's hyperparameters are such keys too: ``ppo:n_steps=64,normalize_advantage=false``).
    """
    spec = parse_spec(text, "agent", AGENT_NESTED_HINT)
    out: dict[str, Any] = {"name": spec.name,
                           "params": {k: v for k, v in spec.values.items() if is_number(v)},
                           **{k: v for k, v in spec.values.items() if not is_number(v)}}
    if spec.label is not None:
        out["label"] = spec.label
    return out
