"""The Stable-Baselines3 hyperparameters an agent spec may give, checked against the algorithm itself.

The keys an algorithm takes are the keyword arguments of its own constructor
(``inspect.signature(stable_baselines3.PPO)`` and so on), less those the adapter sets itself
(:data:`SET_BY_ADAPTER`). A value is checked against that argument's annotation: a whole number
for ``int``, a number for ``float`` (a whole number is one too), ``true``/``false`` for ``bool``,
text for ``str``, a mapping for ``dict`` (``policy_kwargs``), a list of the right items for a
``tuple`` (converted to a tuple: ``train_freq: [4, episode]``). Arguments that take a function or
a class (a learning-rate schedule, a buffer class) accept only their plain forms here. An
annotation this module cannot read accepts any value, and SB3 judges it when it builds the model.

A spec gives hyperparameters in two places, with the same keys allowed in both: beside the
adapter's own options (``ppo:n_steps=64`` on the command line, ``n_steps: 64`` in a file) and
under ``hyperparameters:`` (a file's mapping). :func:`gather_hyperparameters` joins them; a key
given in both places with two different values is refused.
"""

from __future__ import annotations

import collections.abc
import functools
import inspect
import types
import typing
from collections.abc import Mapping
from typing import Any

from shortcut_gym.agents.sb3.algorithms import algorithm_classes
from shortcut_gym.envs.errors import ConfigError

#: Constructor arguments the adapter sets itself: the policy (``MlpPolicy``), the training users
#: as ``env``, the training seed, ``verbose=0``, ``device="cpu"``, and SB3's internal set-up flag.
SET_BY_ADAPTER = ("policy", "env", "seed", "verbose", "device", "_init_setup_model")

_NOT_GIVEN = object()


@functools.cache
def hyperparameter_arguments(algorithm: str) -> dict[str, inspect.Parameter]:
    """The constructor arguments of the SB3 class of ``algorithm`` a spec may give, by name."""
    cls = algorithm_classes()[algorithm]
    kinds = (inspect.Parameter.POSITIONAL_OR_KEYWORD, inspect.Parameter.KEYWORD_ONLY)
    return {name: p for name, p in inspect.signature(cls).parameters.items()
            if p.kind in kinds and name not in SET_BY_ADAPTER}


def known_hyperparameters(algorithm: str) -> list[str]:
    """The hyperparameter names ``algorithm``'s spec may give, sorted."""
    return sorted(hyperparameter_arguments(algorithm))


def class_name(algorithm: str) -> str:
    """``stable_baselines3.PPO`` and so on: the class whose signature is read."""
    return f"stable_baselines3.{algorithm_classes()[algorithm].__name__}"


def _arms(annotation: Any) -> tuple[Any, ...]:
    if typing.get_origin(annotation) in (typing.Union, types.UnionType):
        return typing.get_args(annotation)
    return (annotation,)


def _unreadable(annotation: Any) -> bool:
    return (annotation is inspect.Parameter.empty or annotation is Any
            or isinstance(annotation, (str, typing.ForwardRef)))


def _plain(value: Any, annotation: Any) -> Any:
    """``value`` as ``annotation`` asks (a list made a tuple), or :data:`_NOT_GIVEN` when it does not fit."""
    if _unreadable(annotation):
        return value
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType):
        for arm in typing.get_args(annotation):
            out = _plain(value, arm)
            if out is not _NOT_GIVEN:
                return out
        return _NOT_GIVEN
    if annotation is type(None):
        return value if value is None else _NOT_GIVEN
    if annotation is bool:
        return value if isinstance(value, bool) else _NOT_GIVEN
    if annotation is int:
        return value if isinstance(value, int) and not isinstance(value, bool) else _NOT_GIVEN
    if annotation is float:
        return value if isinstance(value, (int, float)) and not isinstance(value, bool) else _NOT_GIVEN
    if annotation is str:
        return value if isinstance(value, str) else _NOT_GIVEN
    if annotation in (dict, Mapping) or origin in (dict, collections.abc.Mapping):
        return dict(value) if isinstance(value, Mapping) else _NOT_GIVEN
    if origin in (tuple, list) or annotation in (tuple, list):
        return _sequence(value, annotation)
    if origin in (type, collections.abc.Callable) or annotation is type:
        return _NOT_GIVEN  # a class or a function: not written in a spec
    if isinstance(annotation, type):
        return value if isinstance(value, annotation) else _NOT_GIVEN
    return value  # a form this module does not read: SB3 judges it


def _sequence(value: Any, annotation: Any) -> Any:
    if not isinstance(value, (list, tuple)):
        return _NOT_GIVEN
    origin = typing.get_origin(annotation) or annotation
    args = typing.get_args(annotation)
    if not args:
        items = list(value)
    elif origin is tuple and not (len(args) == 2 and args[1] is Ellipsis):
        if len(value) != len(args):
            return _NOT_GIVEN
        items = [_plain(v, a) for v, a in zip(value, args, strict=True)]
    else:
        items = [_plain(v, args[0]) for v in value]
    if any(item is _NOT_GIVEN for item in items):
        return _NOT_GIVEN
    return tuple(items) if origin is tuple else items


def describe(annotation: Any) -> str:
    """Words for what an annotation takes in a spec (``a whole number``, ``a mapping``, ...)."""
    words = []
    for arm in _arms(annotation):
        origin = typing.get_origin(arm)
        if arm is type(None) or origin in (type, collections.abc.Callable) or arm is type:
            continue
        if arm is bool:
            words.append("true or false")
        elif arm is int:
            words.append("a whole number")
        elif arm is float:
            words.append("a number")
        elif arm is str:
            words.append("text")
        elif arm in (dict, Mapping) or origin in (dict, collections.abc.Mapping):
            words.append("a mapping")
        elif origin in (tuple, list) or arm in (tuple, list):
            args = [a for a in typing.get_args(arm) if a is not Ellipsis]
            inner = ", ".join(describe(a).removeprefix("a ") for a in args)
            words.append(f"a list [{inner}]" if inner else "a list")
        else:
            words.append(getattr(arm, "__name__", str(arm)))
    return " or ".join(words) if words else "a class or function, which a spec cannot give"


def check_value(owner: str, algorithm: str, key: str, value: Any) -> Any:
    """``value`` of hyperparameter ``key`` as SB3 takes it; a value of the wrong kind raises naming the key."""
    annotation = hyperparameter_arguments(algorithm)[key].annotation
    out = _plain(value, annotation)
    if out is _NOT_GIVEN:
        wanted = describe(annotation)
        hint = ""
        if "a mapping" in wanted and not isinstance(value, Mapping):
            hint = " (a mapping is written in an agent spec file, under hyperparameters:)"
        raise ConfigError(f"{owner}: hyperparameter {key} of {class_name(algorithm)} must be {wanted}, "
                          f"got {value!r}{hint}")
    return out


def check_keys(owner: str, algorithm: str, keys: list[str], options: list[str] | None = None) -> None:
    """Refuse keys that are not hyperparameters of ``algorithm`` (nor, with ``options``, one of those)."""
    known = hyperparameter_arguments(algorithm)
    unknown = sorted(k for k in keys if k not in known)
    if not unknown:
        return
    adapter = sorted(k for k in unknown if k in SET_BY_ADAPTER)
    if adapter:
        raise ConfigError(f"{owner}: {adapter} are set by the adapter itself, not by a spec (policy MlpPolicy, the "
                          "training users as env, the training seed, verbose 0, device cpu)")
    where = f"options of {owner} ({options}) nor " if options is not None else ""
    raise ConfigError(f"{owner}: unknown key(s) {unknown}: not {where}hyperparameters of {class_name(algorithm)}; "
                      f"its hyperparameters: {sorted(known)}")


def gather_hyperparameters(owner: str, algorithm: str, mapping: Mapping[str, Any] | None,
                           beside: Mapping[str, Any], options: list[str]) -> dict[str, Any]:
    """The hyperparameters of a spec: ``mapping`` (its ``hyperparameters:``) joined with the keys
    given ``beside`` the adapter's ``options``, each checked; a key in both with two values is refused."""
    if mapping is None:
        mapping = {}
    if not isinstance(mapping, Mapping):
        raise ConfigError(f"{owner}: hyperparameters must be a mapping of names to values, got {mapping!r}")
    if not mapping and not beside:
        return {}
    check_keys(owner, algorithm, list(beside), options)
    check_keys(owner, algorithm, [str(k) for k in mapping])
    out = {key: check_value(owner, algorithm, key, value) for key, value in mapping.items()}
    for key, value in beside.items():
        value = check_value(owner, algorithm, key, value)
        if key in out and out[key] != value:
            raise ConfigError(f"{owner}: hyperparameter {key} given twice with two values, {out[key]!r} under "
                              f"hyperparameters and {value!r} beside it; give it once")
        out[key] = value
    return out
