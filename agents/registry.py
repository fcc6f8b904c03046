"""Agent registry: build any agent from its name and parameters, or from a YAML/dict spec."""

from __future__ import annotations

import difflib
import functools
import inspect
import math
import types
import typing
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from pydantic import ConfigDict, Field, field_validator, model_validator

from shortcut_gym.agents.base import Agent, AgentContext
from shortcut_gym.agents.baselines import AlwaysHotkey, AlwaysMenu, LearnFirstK, RandomAgent
from shortcut_gym.agents.learning import ChoiceKernelAgent, ComposedLearner, RescorlaWagnerAgent, RWChoiceKernelAgent
from shortcut_gym.agents.learning.mechanisms import OPTION_DEFAULTS
from shortcut_gym.agents.planned_choice import PlannedChoice
from shortcut_gym.agents.planner import BoundedOptimalPlanner, check_memory_kind
from shortcut_gym.agents.sb3 import A2CAgent, DQNAgent, PPOAgent
from shortcut_gym.agents.static_softmax import StaticSoftmax
from shortcut_gym.agents.tabular import QLearningAgent, SarsaAgent
from shortcut_gym.envs.config import read_yaml, validate
from shortcut_gym.envs.errors import ConfigError, ShortcutGymError
from shortcut_gym.envs.strict import StrictModel
from shortcut_gym.envs.world import World

AGENTS: dict[str, type[Agent]] = {}


def register_agent(cls: type[Agent]) -> type[Agent]:
    """Add an agent class under its ``name`` (usable as a decorator)."""
    if cls.name in AGENTS and AGENTS[cls.name] is not cls:
        raise ConfigError(f"agent name {cls.name!r} is already registered by {AGENTS[cls.name].__name__}")
    AGENTS[cls.name] = cls
    return cls


for _cls in (AlwaysMenu, AlwaysHotkey, LearnFirstK, RandomAgent, StaticSoftmax, RescorlaWagnerAgent,
             ChoiceKernelAgent, RWChoiceKernelAgent, ComposedLearner, BoundedOptimalPlanner, PlannedChoice,
             QLearningAgent, SarsaAgent, PPOAgent, A2CAgent, DQNAgent):
    register_agent(_cls)


#: Meaning of every constructor option (a keyword that is not a fitted parameter) of the registered
#: agents, by keyword; the config reference lists them per agent and its test requires an entry here.
OPTION_DOCS: dict[str, str] = {
    "covariates": "covariates of the utilities, a list of `log_exposure` (ln(1 + earlier trials of the command)) "
                  "and `session` (the session index); each adds one weight per non-menu action",
    "mechanisms": "list of the learner's mechanisms (see `shortcut_gym.agents.learning.mechanisms`); a mechanism's "
                  "parameters exist only when it is listed",
    "options": "fixed prior time estimates in seconds, a mapping of `prior_time_s` (a first menu selection), "
               "`prior_hotkey_s` (a recalled hotkey) and `prior_failure_s` (a failed attempt); defaults "
               + ", ".join(f"{k} {v:g} s" for k, v in OPTION_DEFAULTS.items())
               + " (assumptions of this project, no source)",
    "world": "the world the plan is made for: a bundled scenario name or a mapping of `make_world` arguments "
             "(`scenario`, `costs`, `memory`, ...); null: the world the agent runs in",
    "keyboard_share": "share (0..1) of trials the plan takes to find the hand on the keyboard; null: the plan "
                      "finds its own shares by fixed point",
    "n_bins": "activation grid points of the plan, from tau - 8 s to tau + 8 s (tau the memory's `threshold`, s "
              "its `noise_s`, both in activation units); more is finer and slower",
    "n_weight_bins": "total-trace-weight grid points of the plan (geometric grid)",
    "select_users": "common simulated users on which the plan is compared with simple fixed rules, the better one "
                    "executed (0: execute the plan as it is)",
    "with_lapse": "add the `lapse` parameter: the probability of a uniform random action",
    "model_path": "a saved model file to load (relative to the spec file's folder); null: a new, untrained model "
                  "(a tabular agent simulated so warns once that it acts with its initial table)",
    "allow_other_world": "let a loaded model run on a world other than the one it was trained on (with a warning) "
                         "instead of refusing it",
    "deterministic": "take the policy's most probable action instead of sampling one",
    "hyperparameters": "keyword arguments of the Stable-Baselines3 class's constructor, merged over the adapter's "
                       "defaults (see AgentSpec); other keys of the spec that are not options land here too",
    "normalize": "pass observations through the normalisation statistics frozen at the end of training; a "
                 "loaded model's file records whether it was trained so, and the other setting is refused",
}


def make_agent(name: str, context: AgentContext | None = None, **params: Any) -> Agent:
    """Build a registered agent; unknown names and bad parameters raise :class:`ConfigError` naming them.

    A constructor's own ValueError (a bad option value) and a TypeError about its arguments are
    the caller's mistake too, and come back as ConfigError naming the agent.
    """
    if not isinstance(name, str) or name not in AGENTS:
        raise ConfigError(f"unknown agent {name!r}; registered: {sorted(AGENTS)}")
    try:
        return AGENTS[name](context, **params)
    except ShortcutGymError:
        raise
    except ValueError as err:
        raise ConfigError(f"{name}: {err}") from err
    except TypeError as err:
        if "argument" not in str(err):
            raise
        raise ConfigError(f"{name}: {err}") from err


def refuse_planner_memory(world: World, named: Iterable[tuple[str, str]], who: str) -> None:
    """Refuse up front, with :class:`~shortcut_gym.agents.planner.memory_model.PlannerMemoryError`, a world
    whose memory kind the planner does not model when any (label, registered name) of ``named`` acts on the
    planner's plan (``Agent.needs_planner``); ``who`` names the caller, the message the agent."""
    for label, name in named:
        cls = AGENTS.get(name)
        if cls is not None and cls.needs_planner:
            check_memory_kind(world, f"{who}: agent {label!r}")


#: The fields of an agent spec mapping (:class:`AgentSpec`); every other key is a constructor option
#: or a parameter of the agent (or, for the SB3 agents, a hyperparameter).
SPEC_FIELDS = ("name", "label", "params", "hyperparameters")


def agent_options(cls: type[Agent]) -> list[str]:
    """The constructor options of an agent class: its named keyword arguments beyond ``context``
    (``hyperparameters`` counts as a spec field, not an option), sorted."""
    kinds = (inspect.Parameter.POSITIONAL_OR_KEYWORD, inspect.Parameter.KEYWORD_ONLY)
    return sorted(n for n, p in inspect.signature(cls.__init__).parameters.items()
                  if p.kind in kinds and n not in ("self", "context", "hyperparameters"))


def takes_hyperparameters(cls: type[Agent]) -> bool:
    """True for the agents whose constructor takes SB3 hyperparameters (``ppo``, ``a2c``, ``dqn``)."""
    return "hyperparameters" in inspect.signature(cls.__init__).parameters


def _words(names: Iterable[str]) -> str:
    names = list(names)
    return ", ".join(names) if names else "none"


def _hyperparameter_owners(key: str) -> list[str]:
    """The registered SB3 agents of which ``key`` is a hyperparameter (imports SB3: fault path only)."""
    from shortcut_gym.agents.sb3.hyperparameters import known_hyperparameters

    return [name for name, cls in AGENTS.items()
            if takes_hyperparameters(cls) and key in known_hyperparameters(getattr(cls, "algorithm", name))]


def _probe_parameters(cls: type[Agent], given: dict[str, Any], where: str) -> list[str]:
    """The parameter names of ``cls`` built with the options of ``given`` that shape it (files and
    worlds left out, so nothing is loaded); its refusal of an option starts with ``where``."""
    shaping = {k: v for k, v in given.items()
               if k in agent_options(cls) and not k.endswith("_path") and k != "world"}
    try:
        return list(make_agent(cls.name, **shaping).param_specs())
    except ConfigError as err:
        raise ConfigError(f"{where}: {err}") from None


def check_spec(spec: dict[str, Any], where: str, file: bool = False) -> None:
    """Refuse what can be told wrong in a spec dict before the agent is built: a key that is no
    spec field (``file``: the spec came from a mapping, whose fields are then listed), constructor
    option nor parameter of the agent, ``hyperparameters`` given to an agent that takes none, and
    what the agent's class refuses itself (:meth:`Agent.check_options`: the SB3 hyperparameters).
    Faults are :class:`ConfigError` starting with ``where``."""
    name = spec.get("name")
    cls = AGENTS.get(name) if isinstance(name, str) else None
    if cls is None:
        return
    params = spec.get("params") or {}
    beside = {k: v for k, v in spec.items() if k not in ("name", "params", "label")}
    options = agent_options(cls)
    if not takes_hyperparameters(cls) and beside.get("hyperparameters") is not None:
        sb3 = [n for n, c in AGENTS.items() if takes_hyperparameters(c)]
        raise ConfigError(f"{where}: hyperparameters: are for the SB3 agents only ({', '.join(sb3)}); {name} takes "
                          f"parameters under params: ({_words(_probe_parameters(cls, beside, where))}) and options "
                          f"beside them ({_words(options)})")
    try:
        cls.check_options({**beside, **params} if isinstance(params, dict) else beside)
    except ConfigError as err:
        raise ConfigError(f"{where}: {err}") from None
    if takes_hyperparameters(cls) or not isinstance(params, dict):
        return  # the SB3 check above named every unknown key; a bad params mapping is the schema's to refuse
    parameters = _probe_parameters(cls, beside, where)
    known = set(options) | set(parameters)
    unknown = [k for k in (*params, *beside) if k not in known and k != "hyperparameters"]
    if not unknown:
        return
    fields = f"spec fields: {', '.join(SPEC_FIELDS)} (SB3 agents only); " if file else ""
    listing = f"({fields}parameters of {name}: {_words(parameters)}; options of {name}: {_words(options)})"
    key = unknown[0]
    keys = f"key {key!r}" if len(unknown) == 1 else "keys " + ", ".join(repr(k) for k in unknown)
    if file and all(k in params for k in unknown):
        keys += " under params"
    owners = _hyperparameter_owners(key)
    if len(unknown) == 1 and owners:
        raise ConfigError(f"{where}: unknown {keys}: {key} is a hyperparameter of the SB3 agents "
                          f"({', '.join(owners)}), not a parameter or option of {name} {listing}")
    close = difflib.get_close_matches(key, [*(SPEC_FIELDS if file else ()), *known], n=1)
    hint = f"; did you mean {close[0]!r}?" if len(unknown) == 1 and close else ""
    raise ConfigError(f"{where}: unknown {keys} {listing}{hint}")


def _arms(annotation: Any) -> set[Any]:
    """The types of an annotation (a union's arms), None left out."""
    if typing.get_origin(annotation) in (typing.Union, types.UnionType):
        return set(typing.get_args(annotation)) - {type(None)}
    return {annotation}


@functools.cache
def _option_hints(cls: type[Agent]) -> dict[str, Any]:
    """The constructor's annotations of the options of ``cls`` (an unreadable one left out)."""
    try:
        hints = typing.get_type_hints(cls.__init__)
    except (NameError, TypeError):
        return {}
    return {key: hints[key] for key in agent_options(cls) if key in hints}


def declared_number_type(cls: type[Agent], key: str) -> type | None:
    """The number type ``cls`` declares for the ``params`` key ``key``: ``int`` for an option its
    constructor annotates ``int`` (``n_bins``), ``float`` for a ``float`` option and for a fitted
    parameter (:class:`ParamSpec` values are real numbers), None when the key is left as written
    (an SB3 hyperparameter, judged by its algorithm's own annotation; an option of another kind)."""
    if key in agent_options(cls):
        arms = _arms(_option_hints(cls).get(key))
        return int if arms == {int} else float if float in arms else None
    return None if takes_hyperparameters(cls) else float


def typed_params(name: str, params: dict[str, Any]) -> dict[str, Any]:
    """The numbers of ``params`` as agent ``name`` declares them (:func:`declared_number_type`): a whole
    number for an ``int`` key (``4.0`` becomes 4; ``4.5`` raises ValueError naming the agent and the
    key; a ConfigError, a ValueError), a float for a ``float`` one; other values as given."""
    cls = AGENTS.get(name)
    if cls is None:
        return params
    out = dict(params)
    for key, value in params.items():
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            continue  # not a number: refused by the field's own check
        kind = declared_number_type(cls, key)
        if kind is int:
            if not math.isfinite(value) or value != int(value):
                raise ConfigError(f"{name}: parameter {key} must be a whole number ({name} declares it int), "
                                 f"got {value!r}")
            out[key] = int(value)
        elif kind is float:
            out[key] = float(value)
    return out


class AgentSpec(StrictModel):
    """One agent as a YAML mapping (``--agent-file``, sweep specs): a registered ``name``, its
    ``params`` and any constructor option beside them (``model_path``, ``deterministic``,
    ``mechanisms``, ``n_bins``, ...); ``label`` names it in outputs. An option whose key ends in
    ``_path`` is taken relative to the spec file's folder when the spec is read from a file.

    The SB3 agents (``ppo``, ``a2c``, ``dqn``) take the keyword arguments of their Stable-Baselines3
    class's constructor as hyperparameters (``n_steps``, ``learning_rate``, ``gamma``,
    ``buffer_size``, ...; all but ``policy``, ``env``, ``seed``, ``verbose`` and ``device``, which the
    adapter sets), either under ``hyperparameters`` or beside the options like any other key (under ``params``
    too, where a number keeps the type it is written in), which is how the command line gives them:
    ``--agent ppo:n_steps=64,learning_rate=3e-4`` is this file's
    ``name: ppo`` with ``hyperparameters: {n_steps: 64, learning_rate: 3.0e-4}``. A key given in both
    places with two different values is refused; an unknown key is refused listing the known ones.
    Nested values (``policy_kwargs: {net_arch: [32, 32]}``) go under ``hyperparameters`` in a file:
    the one-line form takes no mappings. They are merged over the adapter's own defaults
    (``shortcut_gym.agents.sb3.DEFAULT_HYPERPARAMETERS``) and matter when a new model is trained.
    """

    model_config = ConfigDict(extra="allow", frozen=True, allow_inf_nan=False)
    name: str = Field(min_length=1, description="registered agent name (see [Agents](#agents))")
    label: str | None = Field(default=None, min_length=1, description="name in the outputs (default: from the spec)")
    params: dict[str, int | float] = Field(default_factory=dict, description=(
        "parameters by name (numbers, each of the type the agent declares: a whole number for an int option "
        "such as `n_bins`; the agent's defaults otherwise)"))
    hyperparameters: dict[str, Any] | None = Field(
        default=None, description="SB3 agents only: keyword arguments of the algorithm's constructor "
                                  "(stable_baselines3.PPO, A2C, DQN), e.g. {n_steps: 64, gamma: 0.95, "
                                  "policy_kwargs: {net_arch: [32, 32]}}; the adapter's defaults otherwise")

    @field_validator("name")
    @classmethod
    def _registered(cls, name: str) -> str:
        if name not in AGENTS:
            raise ValueError(f"unknown agent {name!r}; registered: {sorted(AGENTS)}")
        return name

    @field_validator("params", mode="before")
    @classmethod
    def _numbers(cls, params: Any) -> Any:
        if isinstance(params, dict):
            for key, value in params.items():
                if isinstance(value, bool) or not isinstance(value, (int, float)):
                    raise ValueError(f"parameter {key} must be a number, got {value!r}")
                if not math.isfinite(value):  # one fault, not one per arm of the field's type
                    raise ValueError(f"parameter {key} must be a finite number, got {value!r}")
        return params

    @model_validator(mode="after")
    def _declared_types(self) -> AgentSpec:
        typed = typed_params(self.name, dict(self.params))
        if typed != self.params or any(type(typed[k]) is not type(v) for k, v in self.params.items()):
            object.__setattr__(self, "params", typed)  # frozen model: set once, while it is validated
        return self

    def as_dict(self) -> dict[str, Any]:
        """The spec as the plain dict :func:`agent_from_spec` and the sweep take (no unset label)."""
        out: dict[str, Any] = {"name": self.name, "params": dict(self.params), **(self.model_extra or {})}
        if self.hyperparameters is not None:
            out["hyperparameters"] = dict(self.hyperparameters)
        if self.label is not None:
            out["label"] = self.label
        return out


def read_agent_spec(path: str | Path) -> AgentSpec:
    """A validated :class:`AgentSpec` from a YAML file; faults name the file and the field.

    A bare name (no folder, no suffix) that is not a file names a bundled spec of ``configs/agents``.
    Relative ``*_path`` options are read from the file's folder.
    """
    path = Path(path)
    if not path.exists() and path.suffix == "" and len(path.parts) == 1:
        from shortcut_gym.envs.config import bundled_config_dir

        bundled = bundled_config_dir() / "agents" / f"{path}.yaml"
        if not bundled.is_file():
            known = sorted(p.stem for p in bundled.parent.glob("*.yaml"))
            raise ConfigError(f"{path}: no such agent spec file, nor a bundled one; bundled: {known}")
        path = bundled
    if path.is_dir():
        raise ConfigError(f"{path}: is a folder, not an agent spec file (give a YAML file, or a bundled spec's name)")
    if not path.is_file():
        raise ConfigError(f"{path}: no such agent spec file")
    spec = validate(AgentSpec, read_yaml(path), str(path))
    extra = dict(spec.model_extra or {})
    for key, value in extra.items():
        if key.endswith("_path") and isinstance(value, str) and not Path(value).is_absolute():
            extra[key] = str(path.parent / value)
    spec = spec.model_copy(update=extra)
    check_spec(spec.as_dict(), str(path), file=True)
    return spec


def agent_from_spec(spec: dict[str, Any] | str | Path, context: AgentContext | None = None,
                    source: str = "agent spec") -> Agent:
    """Build an agent from ``{'name': ..., 'params': {...}, ...}`` or a YAML file holding one
    (validated as :class:`AgentSpec`). ``label`` is a name for outputs and not passed on. Faults
    start with ``source`` (a file's own path when ``spec`` is one)."""
    if isinstance(spec, (str, Path)):
        source = str(spec)
        spec = read_agent_spec(spec).as_dict()
    if not isinstance(spec, dict) or "name" not in spec:
        raise ConfigError(f"{source}: an agent spec needs a 'name' key, got {spec!r}")
    extra = {k: v for k, v in spec.items() if k not in ("name", "params", "label")}
    params = spec.get("params")
    if params is None:
        params = {}
    if not isinstance(params, dict):
        raise ConfigError(f"{source}: 'params' must be a mapping, got {params!r}")
    clash = sorted(set(params) & set(extra))
    if clash:
        raise ConfigError(f"{source}: {clash} given both under 'params' and beside it")
    try:
        return make_agent(spec["name"], context, **extra, **params)
    except ConfigError as err:
        raise ConfigError(f"{source}: {err}") from None
