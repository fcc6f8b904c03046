"""Loading and validating YAML settings; errors name the file, the field and the value."""

from __future__ import annotations

import re
from importlib import resources
from pathlib import Path
from typing import Any, TypeVar

import yaml
from pydantic import BaseModel, ValidationError

from shortcut_gym.envs.aids import AidSettings
from shortcut_gym.envs.costs import CostSettings
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.memory import MemorySettings
from shortcut_gym.envs.task import ScenarioSettings, ScheduleSettings

M = TypeVar("M", bound=BaseModel)

#: Sub-folder of the bundled configs for each settings type.
_FOLDERS: dict[type[BaseModel], str] = {
    CostSettings: "costs",
    ScenarioSettings: "scenarios",
    MemorySettings: "memory",
    AidSettings: "aids",
}

#: What each settings type is called in messages (the words of the options and files that give it).
_KINDS: dict[type[BaseModel], str] = {
    CostSettings: "costs",
    ScenarioSettings: "scenario",
    MemorySettings: "memory",
    AidSettings: "interface aid",
    ScheduleSettings: "schedule",
}


def kind_of(model: type[BaseModel]) -> str:
    """The user-facing name of a settings type (``scenario``, ``costs``...; the class name for others)."""
    return _KINDS.get(model, model.__name__)


def format_validation_error(err: ValidationError, source: str) -> str:
    """One line per fault: '<source>: <dotted.field>: <message> (got <value>)' (a fault of the whole
    mapping has no field; pydantic's 'Value error, ' prefix is dropped; a long value is cut). A
    tagged union's tag written in angle brackets (``Tag("<block>")``) names no field and is left out."""
    lines = []
    for e in err.errors():
        where = ".".join(str(p) for p in e["loc"] if not (isinstance(p, str) and p.startswith("<") and p.endswith(">")))
        msg = e["msg"]
        if e["type"] == "extra_forbidden":
            msg = "unknown key"
        for prefix in ("Value error, ", "Assertion failed, "):
            msg = msg.removeprefix(prefix)
        got = e.get("input")
        shown = repr(got)
        if len(shown) > MAX_SHOWN_VALUE:
            shown = f"{shown[:MAX_SHOWN_VALUE]}... ({type(got).__name__} of {len(got)} entries)" if hasattr(
                got, "__len__") else shown[:MAX_SHOWN_VALUE] + "..."
        got_text = "" if isinstance(got, dict) else f" (got {shown})"
        lines.append(f"{source}: {where}: {msg}{got_text}" if where else f"{source}: {msg}{got_text}")
    return "\n".join(lines)


#: Longest value repr a config fault quotes (characters); a longer one is cut.
MAX_SHOWN_VALUE = 80


def validate(model: type[M], data: Any, source: str) -> M:
    """Validate ``data`` into ``model`` or raise :class:`ConfigError` naming every fault."""
    if isinstance(data, model):
        return data
    if not isinstance(data, dict):
        raise ConfigError(f"{source}: expected a mapping of {kind_of(model)} fields, got {type(data).__name__}")
    try:
        return model.model_validate(data)
    except ValidationError as err:
        raise ConfigError(format_validation_error(err, source)) from None


def bundled_config_dir() -> Path:
    """Folder of the configs shipped with the package (``configs/`` of the project)."""
    return Path(str(resources.files("shortcut_gym.configs")))


def bundled_names(model: type[BaseModel]) -> list[str]:
    """Names of the bundled presets of one settings type."""
    folder = bundled_config_dir() / _FOLDERS[model]
    return sorted(p.stem for p in folder.glob("*.yaml"))


class _Loader(yaml.SafeLoader):
    """Safe YAML that refuses a key given twice in one mapping and reads ``1e-1`` as a number.

    PyYAML follows YAML 1.1, whose float pattern needs a dot (``1.0e-1``); ``1e-1`` would be a
    string. The resolver below adds the YAML 1.2 core-schema float form.
    """


def _mapping_without_duplicates(loader: _Loader, node: yaml.MappingNode) -> dict[Any, Any]:
    seen: dict[Any, Any] = {}
    for key_node, _ in node.value:
        key = loader.construct_object(key_node, deep=True)
        if key in seen:
            line = key_node.start_mark.line + 1
            raise yaml.constructor.ConstructorError(
                None, None, f"key {key!r} is given twice in one mapping (line {seen[key]} and line {line})",
                key_node.start_mark)
        seen[key] = key_node.start_mark.line + 1
    return loader.construct_mapping(node, deep=True)


_Loader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _mapping_without_duplicates)
_Loader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"^[-+]?(?:[0-9][0-9_]*)(?:\.[0-9_]*)?[eE][-+]?[0-9]+$"),
    list("-+0123456789"),
)


def parse_yaml(text: str, source: str) -> Any:
    """Parse YAML text (duplicate keys refused); a fault names the source and line."""
    try:
        return yaml.load(text, Loader=_Loader)  # noqa: S506 - _Loader is a SafeLoader
    except yaml.YAMLError as err:
        raise ConfigError(f"{source}: not valid YAML: {' '.join(str(err).split())}") from None


def read_yaml(path: Path) -> Any:
    """Parse a UTF-8 YAML file; a missing file, bad encoding or syntax error names the file (and line)."""
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"{path}: no such file")
    try:
        text = path.read_bytes().decode("utf-8")
    except UnicodeDecodeError as err:
        raise ConfigError(f"{path}: not UTF-8 text (byte {err.start} is {err.object[err.start]:#04x})") from None
    return parse_yaml(text, str(path))


def load_settings(model: type[M], spec: str | Path | dict | M | None) -> M:
    """Settings from a preset name, a YAML path, a dict or an instance (None = defaults)."""
    if spec is None:
        return model()
    if isinstance(spec, model):
        return spec
    if isinstance(spec, dict):
        return validate(model, spec, f"<{kind_of(model)} dict>")
    if isinstance(spec, (str, Path)):
        path = Path(spec)
        if path.suffix in (".yaml", ".yml") or path.exists():
            return validate(model, read_yaml(path), str(path))
        folder = _FOLDERS.get(model)
        preset = bundled_config_dir() / folder / f"{spec}.yaml" if folder else None
        if preset is None or not preset.is_file():
            known = bundled_names(model) if folder else []
            raise ConfigError(f"unknown {kind_of(model)} preset {str(spec)!r}, and no file {str(spec)!r} either "
                              f"(bundled presets: {known}; a path is read as a file when it ends in .yaml "
                              "or .yml or exists)")
        return validate(model, read_yaml(preset), str(preset))
    raise ConfigError(f"cannot read {kind_of(model)} settings from a {type(spec).__name__}")
