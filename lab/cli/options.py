"""Option and spec parsing shared by the subcommands (the one place CLI strings are read).

Every fault raises :class:`CLIError` naming the option text; ranges and paths: :mod:`.ranges`.

* ``--model [label=]agent[:key=value,...]``: keys that are parameters are held fixed, others are
  constructor options; a value with '+' is a list (``mechanisms=value+memory_aware+lapse``).
* ``--agent name[:param=value,...]``: an agent spec for simulation.
* ``--prior label:param=family:a:b``: a MAP prior (families in :data:`PRIOR_FAMILIES`).
"""

from __future__ import annotations

import argparse
import sys
from typing import Any

import pandas as pd

from shortcut_gym.agents.registry import AGENTS, make_agent
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World, make_world
from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.ranges import output_folder, seed, whole_number
from shortcut_gym.lab.fitting import PRIOR_FAMILIES, ModelSpec, make_prior

MODEL_HELP = ("model as [label=]agent[:key=value,...]; keys that are parameters are held fixed, others are "
              "options, '+' makes a list (repeatable), e.g. ck=choice_kernel:lapse=0.02")


def parse_value(text: str) -> Any:
    """One ``key=value`` value: a '+' list, a boolean word, a number, else the text itself."""
    if "+" in text:
        return [t for t in text.split("+") if t]
    low = text.lower()
    if low in ("true", "yes", "on"):
        return True
    if low in ("false", "no", "off"):
        return False
    try:
        return float(text)
    except ValueError:
        return text


def parse_model(text: str) -> ModelSpec:
    """'[label=]name[:key=value,...]' -> ModelSpec; keys that are parameters are held fixed.

    Example: ``logit2=static_softmax:covariates=log_exposure+session,b_learn=-3``.
    """
    label, eq, rest = text.partition("=")
    if not eq or ":" in label:
        label, rest = "", text
    name, _, args = rest.partition(":")
    if not name:
        raise CLIError(f"model {text!r}: missing agent name")
    if name not in AGENTS:
        raise CLIError(f"model {text!r}: unknown agent {name!r}; registered: {sorted(AGENTS)}")
    options: dict[str, Any] = {}
    fixed: dict[str, float] = {}
    for item in filter(None, args.split(",")):
        key, eq2, value = item.partition("=")
        if not eq2 or not key:
            raise CLIError(f"model {text!r}: {item!r} must look like key=value")
        options[key] = parse_value(value)
    try:
        probe = make_agent(name, **{k: v for k, v in options.items() if not isinstance(v, float)})
    except ConfigError as err:
        raise CLIError(f"model {text!r}: {err}") from None
    for key in list(options):
        if key in probe.param_specs():
            value = options.pop(key)
            if not isinstance(value, float):
                raise CLIError(f"model {text!r}: parameter {key} value {value!r} is not a number")
            fixed[key] = value
    return ModelSpec(name, label or "", options, fixed)


def parse_prior(text: str) -> tuple[str, Any]:
    """'name=family:a:b' -> (parameter, frozen scipy distribution on the natural scale).

    Families: normal:mean:sd, beta:a:b, gamma:shape:scale, lognormal:mu:sigma (of ln x).
    """
    name, eq, rest = text.partition("=")
    parts = rest.split(":")
    if not eq or not name or len(parts) != 3 or parts[0] not in PRIOR_FAMILIES:
        raise CLIError(f"prior {text!r} must look like name=family:a:b with family in {sorted(PRIOR_FAMILIES)}")
    try:
        a, b = float(parts[1]), float(parts[2])
    except ValueError:
        raise CLIError(f"prior {text!r}: {parts[1]!r} and {parts[2]!r} must be numbers") from None
    try:
        return name, make_prior(parts[0], a, b)
    except ValueError as err:  # make_prior's faults are all about the numbers given
        raise CLIError(f"prior {text!r}: {err}") from None


def parse_agent_arg(text: str) -> dict[str, Any]:
    """'name' or 'name:p=v,q=w' -> agent spec dict; bad syntax raises ValueError naming it."""
    name, _, rest = text.partition(":")
    if not name:
        raise CLIError(f"agent {text!r}: missing agent name before ':'")
    params: dict[str, Any] = {}
    for item in filter(None, rest.split(",")):
        key, eq, value = item.partition("=")
        if not eq or not key:
            raise CLIError(f"agent {text!r}: parameter {item!r} must look like name=value")
        try:
            params[key] = float(value)
        except ValueError:
            raise CLIError(f"agent {text!r}: parameter {key} value {value!r} is not a number") from None
    return {"name": name, "params": params}


def add_world_options(p: argparse.ArgumentParser, sessions: bool = False) -> None:
    """The world options (scenario, costs, memory; optionally sessions) of the simulating subcommands."""
    p.add_argument("--scenario", default=None, help="scenario preset name or YAML path (default: demo)")
    p.add_argument("--costs", default=None, help="cost preset name or YAML path")
    p.add_argument("--memory", default=None, help="memory settings YAML path or preset name")
    if sessions:
        p.add_argument("--sessions", type=whole_number(1), default=None,
                       help="sessions per user (default: the scenario's)")


def world_of(args: argparse.Namespace) -> World:
    """The :class:`~shortcut_gym.envs.world.World` the options of :func:`add_world_options` name."""
    sessions = getattr(args, "sessions", None)
    return make_world(args.scenario, args.costs, args.memory, None if sessions is None else {"sessions": sessions})


def add_common(p: argparse.ArgumentParser, models: bool = True) -> None:
    """Options shared by the analysis subcommands."""
    p.add_argument("--scenario", default=None, help="scenario preset or YAML whose commands the log names")
    if models:
        p.add_argument("--model", action="append", required=True, help=MODEL_HELP)
    p.add_argument("--starts", type=whole_number(1), default=10, help="optimiser starts per participant x model")
    p.add_argument("--seed", type=seed, default=0, help="seed of the random starts (and simulations)")
    p.add_argument("--jobs", type=whole_number(1), default=1, help="worker processes")
    p.add_argument("--out", type=output_folder, required=True, help="output folder (created)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def add_skip_bad(p: argparse.ArgumentParser) -> None:
    """The ``--skip-bad-participants`` option of the subcommands that read a trial log."""
    p.add_argument("--skip-bad-participants", action="store_true",
                   help="leave out participants whose log rows have faults (each listed with its first fault) "
                        "and fit the rest, instead of stopping at the log's faults")


def report_skipped(log: pd.DataFrame) -> None:
    """Print (stderr) the participants a ``--skip-bad-participants`` read left out, with their first fault."""
    skipped = log.attrs.get("skipped_participants") or {}
    if skipped:
        print(f"skipped {len(skipped)} participant(s) with faulty rows:", file=sys.stderr)
        for pid, fault in skipped.items():
            print(f"  {pid!r}: {fault}", file=sys.stderr)


def models_of(args: argparse.Namespace) -> list[ModelSpec]:
    """The ``--model`` options parsed; labels must be unique."""
    specs = [parse_model(m) for m in args.model]
    labels = [s.label for s in specs]
    dup = {lab for lab in labels if labels.count(lab) > 1}
    if dup:
        raise CLIError(f"--model labels repeat: {sorted(dup)}; name them label=agent:...")
    return specs


def priors_of(texts: list[str] | None, specs: list[ModelSpec]) -> dict[str, dict]:
    """``--prior label:param=family:a:b`` -> {label: {param: distribution}}."""
    out: dict[str, dict] = {}
    labels = {s.label for s in specs}
    for text in texts or []:
        label, colon, rest = text.partition(":")
        if not colon or label not in labels:
            raise CLIError(f"--prior {text!r} must start with a model label from {sorted(labels)} and ':'")
        name, dist = parse_prior(rest)  # raises CLIError naming the text
        out.setdefault(label, {})[name] = dist
    return out
