"""Sweep specs (``configs/sweeps/*.yaml``): schema, loading and dotted-path overrides.

A spec names a base setting (the arguments of ``make_world``), the parameters to vary by dotted
path into the scenario / costs / memory / schedule settings, the design (grid, random or Latin
hypercube), the agents, the simulated users' seeds, an optional horizon and the outputs. Every
fault is reported as ``<source>: <dotted.field>: <message>``.
"""

from __future__ import annotations

import copy
import math
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import ConfigDict, Discriminator, Field, Tag, ValidationError, field_validator, model_validator

from shortcut_gym.envs.aids import AidSettings
from shortcut_gym.envs.config import format_validation_error, load_settings, read_yaml
from shortcut_gym.envs.costs import CostSettings
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.memory import MemorySettings
from shortcut_gym.envs.strict import StrictModel
from shortcut_gym.envs.task import ScenarioSettings, ScheduleSettings

#: Most design points of one sweep (each point is one run per agent, planned in memory at once).
MAX_POINTS = 100_000

#: Largest seed (seeds are stored as signed 64-bit integers in the result tables).
MAX_SEED = 2**63 - 1
#: Most simulated users per run (their per-trial state is held in memory at once).
MAX_USERS = 1_000_000

#: Settings sections a dotted path may start with (``aids``: interface aids, :mod:`shortcut_gym.envs.aids`).
SECTIONS = ("scenario", "costs", "memory", "schedule", "aids")


class SweepSpecError(ConfigError):
    """A sweep spec is invalid; the message names the file and the dotted field."""


class _Strict(StrictModel):
    """Spec base: no unknown keys, finite numbers, no boolean as a number."""


class BaseSetting(_Strict):
    """The setting every run starts from (``make_world`` arguments; presets, paths or mappings)."""

    scenario: str | dict[str, Any] | None = Field(default=None, description=(
        "a bundled scenario name, a YAML path (from the spec's folder) or the settings inline; null: "
        "`tidepool_logbook`"))
    costs: str | dict[str, Any] | None = Field(default=None, description=(
        "a bundled costs preset, a YAML path or the settings inline; null: `average_skilled_mouse`"))
    memory: str | dict[str, Any] | None = Field(default=None, description=(
        "a bundled memory preset, a YAML path or the settings inline; null: the MemorySettings defaults"))
    schedule: dict[str, Any] | None = Field(default=None, description=(
        "ScheduleSettings keys laid over the scenario's own schedule; null: the scenario's"))
    aids: str | dict[str, Any] | None = Field(default=None, description=(
        "a bundled aids preset, a YAML path or the settings inline; null: no aids"))
    observe_recall: bool = Field(default=False, description=(
        "add the true recall probability of the trial's command to the observation"))
    target_encoding: Literal["onehot", "index"] = Field(default="onehot", description=(
        "the trial's command in the observation: one entry per command (`onehot`) or its index (`index`)"))


class ParameterRange(_Strict):
    """Values of one varied parameter: an explicit list, or ``low``..``high`` (linear or log)."""

    values: list[float | int | str] | None = Field(default=None, description=(
        "the parameter's values, in the dotted setting's own unit (non-empty; instead of low/high)"))
    low: float | None = Field(default=None, description="lowest value, in the setting's own unit (< high)")
    high: float | None = Field(default=None, description="highest value, in the setting's own unit")
    steps: int | None = Field(default=None, ge=2, description=(
        "grid design only: number of values from low to high, both ends included"))
    scale: Literal["linear", "log"] = Field(default="linear", description=(
        "spacing from low to high: `linear`, or `log` (geometric steps, log-uniform draws; needs low > 0)"))

    @model_validator(mode="after")
    def _one_form(self) -> ParameterRange:
        if self.values is not None:
            if len(self.values) == 0:
                raise ValueError("values is empty: give at least one value")
            if self.low is not None or self.high is not None or self.steps is not None:
                raise ValueError("give either values or low/high(/steps), not both")
            return self
        if self.low is None or self.high is None:
            raise ValueError("give values, or both low and high")
        if not self.low < self.high:
            raise ValueError(f"low ({self.low}) must be below high ({self.high})")
        if self.scale == "log" and self.low <= 0:
            raise ValueError(f"a log scale needs low > 0, got {self.low}")
        return self


class Variation(_Strict):
    """The design over the varied parameters."""

    design: Literal["grid", "random", "lhs"] = Field(default="grid", description=(
        "`grid`: every combination of the values; `random`: independent uniform draws; `lhs`: Latin hypercube "
        "(McKay, Beckman & Conover 1979)"))
    points: int | None = Field(default=None, ge=1, description="number of points (random, lhs)")
    seed: int = Field(default=0, description="seed of the random and lhs draws of the design points (not of the users)")
    parameters: dict[str, ParameterRange] = Field(default_factory=dict, description=(
        "dotted setting path (`costs.klm.keystroke_s`, starting with scenario, costs, memory, schedule or aids) "
        "-> its values"))

    @model_validator(mode="after")
    def _design_fields(self) -> Variation:
        size = (math.prod(len(r.values) if r.values is not None else (r.steps or 1) for r in self.parameters.values())
                if self.design == "grid" else (self.points or 0))
        if size > MAX_POINTS:
            raise ValueError(f"the {self.design} design has {size:,} points; the limit is {MAX_POINTS:,} "
                             "(split the sweep into several specs)")
        if self.design == "grid":
            if self.points is not None:
                raise ValueError("points applies to the random and lhs designs only (a grid has its own size)")
            for path, r in self.parameters.items():
                if r.values is None and r.steps is None:
                    raise ValueError(f"parameters.{path}: a grid over low..high needs steps")
        else:
            if self.points is None:
                raise ValueError(f"the {self.design} design needs points")
            for path, r in self.parameters.items():
                if r.steps is not None:
                    raise ValueError(f"parameters.{path}: steps applies to the grid design only")
            if not self.parameters:
                raise ValueError(f"the {self.design} design needs at least one parameter")
        return self


class AgentEntry(_Strict):
    """One agent: a registered name and its parameters; ``label`` names it in the outputs."""

    model_config = ConfigDict(extra="allow", frozen=True, allow_inf_nan=False)
    name: str = Field(min_length=1, description="registered agent name (see [Agents](#agents))")
    params: dict[str, Any] = Field(default_factory=dict, description="the agent's parameters by name")
    label: str | None = Field(default=None, description=(
        "name of the agent in the outputs (default: from the name and parameters)"))


class SeedBlock(_Strict):
    """Simulated users: seeds ``first``, ``first + 1``, ... (``count`` of them)."""

    first: int = Field(default=0, ge=0, description="seed of the first simulated user")
    count: int = Field(ge=1, le=MAX_USERS, description="number of simulated users, the same in every run")

    @model_validator(mode="after")
    def _fits_in_int64(self) -> SeedBlock:
        if self.first + self.count - 1 > MAX_SEED:
            raise ValueError(f"the last seed {self.first + self.count - 1} exceeds {MAX_SEED}")
        return self


def _seed_form(value: Any) -> str | None:
    """Which form a spec's ``seeds`` take, by the value's type: a block (a mapping), a list, or
    neither (None: refused in one line, not once per form)."""
    if isinstance(value, dict | SeedBlock):
        return "<block>"
    if isinstance(value, list):
        return "<list>"
    return None


class Horizon(_Strict):
    """Overrides of the schedule's length."""

    sessions: int | None = Field(default=None, ge=1, description="sessions per user instead of the schedule's")
    trials_per_session: int | None = Field(default=None, ge=1, description=(
        "trials per session instead of the schedule's"))


class BreakEvenMap(_Strict):
    """The break-even map: two varied cost parameters, the learner and the command it is read for."""

    x: str = Field(description="varied parameter (dotted path) on the map's x axis; numeric values, grid design")
    y: str = Field(description="varied parameter on the y axis (not x)")
    learner: str | None = Field(default=None, description=(
        "label of the agent whose saving over `always_menu` is mapped (one of the agents' labels, checked before "
        "any run); default: the first `learn_first_k`, else the reference agent"))
    command: int | str = Field(default=0, description=(
        "the command the map is read for: its name, or its index in menu order (from 0)"))


class Outputs(_Strict):
    """What to write besides the result table and the summary."""

    trial_tables: bool = Field(default=False, description="also write every trial of every run (trials.parquet)")
    plots: bool = Field(default=True, description="draw the plots (plots/)")
    adoption_by: str | None = Field(default=None, description=(
        "varied parameter (dotted path) with one panel per value in the adoption plot; default: the first varied one"))
    break_even: BreakEvenMap | None = Field(default=None, description=(
        "the break-even map; null: drawn over the first two varied parameters when the design is a grid"))
    reference_agent: str | None = Field(default=None, description=(
        "label of the agent the summary's gap_to_reference_s is measured against (one of the agents' labels, "
        "checked before any run); default: the first `bounded_optimal`"))


class SweepSpec(_Strict):
    """A whole sweep."""

    name: str = Field(min_length=1, pattern=r"^[A-Za-z0-9_.-]+$", description=(
        "the sweep's name (letters, digits, `_.-`; titles its report and plots)"))
    description: str = Field(default="", description="free text about the sweep")
    base: BaseSetting = Field(default=BaseSetting(), description="the setting every run starts from")
    vary: Variation = Field(default=Variation(), description="the varied parameters and the design over them")
    agents: list[AgentEntry] = Field(min_length=1, description="the agents, each run at every design point")
    seeds: Annotated[
        Annotated[SeedBlock, Tag("<block>")] | Annotated[list[int], Tag("<list>")],
        Discriminator(_seed_form, custom_error_type="seed_form",
                      custom_error_message="must be a block {first, count} or a list of distinct seeds"),
    ] = Field(description=(
        "the simulated users: a block `{first, count}` or a list of distinct seeds (0 .. 2^63 - 1)"))
    horizon: Horizon | None = Field(default=None, description="shorter or longer schedule; null: the base's")
    outputs: Outputs = Field(default=Outputs(), description="what to write besides the tables")

    @field_validator("seeds", mode="before")
    @classmethod
    def _no_bool_seed(cls, v: Any) -> Any:
        if isinstance(v, list):
            for i, s in enumerate(v):
                if isinstance(s, bool):
                    raise ValueError(f"seed {i} is {s}, a bool, not a whole number")
        return v

    @field_validator("seeds")
    @classmethod
    def _seed_list(cls, v: SeedBlock | list[int]) -> SeedBlock | list[int]:
        if isinstance(v, list):
            if not v:
                raise ValueError("the seed list is empty")
            if len(set(v)) != len(v):
                raise ValueError("the seed list repeats a seed")
            if any(s < 0 or s > MAX_SEED for s in v):
                raise ValueError(f"seeds must be in 0..{MAX_SEED}")
            if len(v) > MAX_USERS:
                raise ValueError(f"{len(v)} seeds; at most {MAX_USERS:,} simulated users per run")
        return v

    def seed_list(self) -> list[int]:
        """Seeds of the simulated users (the same users in every run)."""
        if isinstance(self.seeds, list):
            return list(self.seeds)
        return list(range(self.seeds.first, self.seeds.first + self.seeds.count))


def parse_spec(data: Any, source: str = "<sweep spec>") -> SweepSpec:
    """Validate a mapping into a :class:`SweepSpec`, then check dotted paths and agents."""
    if not isinstance(data, dict):
        raise SweepSpecError(f"{source}: a sweep spec must be a mapping, got {type(data).__name__}")
    try:
        spec = SweepSpec.model_validate(data)
    except ValidationError as err:
        raise SweepSpecError(format_validation_error(err, source)) from None
    base = base_settings(spec, source)
    for path in spec.vary.parameters:
        resolve_path(base, path, f"{source}: vary.parameters.{path}")
    out = spec.outputs
    varied = list(spec.vary.parameters)
    for field, path in (("adoption_by", out.adoption_by),  # type: ignore[assignment]
                        ("break_even.x", out.break_even.x if out.break_even else None),
                        ("break_even.y", out.break_even.y if out.break_even else None)):
        if path is not None and path not in varied:
            raise SweepSpecError(f"{source}: outputs.{field}: {path!r} is not a varied parameter; varied: {varied}")
    if out.break_even is not None:
        cmd = out.break_even.command
        names = [c["name"] for m in base["scenario"]["menus"] for c in m["items"]]
        if isinstance(cmd, str) and cmd not in names:
            raise SweepSpecError(f"{source}: outputs.break_even.command: unknown command {cmd!r}; known: {names}")
        if isinstance(cmd, int) and not 0 <= cmd < len(names):
            raise SweepSpecError(f"{source}: outputs.break_even.command: index {cmd} is outside 0..{len(names) - 1}")
        if spec.vary.design != "grid":
            raise SweepSpecError(f"{source}: outputs.break_even: the break-even map needs the grid design, "
                                 f"got {spec.vary.design!r}")
        if out.break_even.x == out.break_even.y:
            raise SweepSpecError(f"{source}: outputs.break_even: x and y are the same parameter {out.break_even.x!r}")
        for axis in ("x", "y"):
            r = spec.vary.parameters[getattr(out.break_even, axis)]
            if r.values is not None and not all(isinstance(v, (int, float)) for v in r.values):
                raise SweepSpecError(f"{source}: outputs.break_even.{axis}: the map needs numeric values")
    return spec


def load_spec(path: str | Path, agents: list[dict[str, Any]] | None = None) -> SweepSpec:
    """Read and validate a sweep spec YAML file (a bare name looks in the bundled configs/sweeps);
    ``agents`` (agent spec dicts) replaces the file's agent list."""
    p = Path(path)
    if not p.exists() and p.suffix == "" and "/" not in str(path):
        from shortcut_gym.envs.config import bundled_config_dir

        p = bundled_config_dir() / "sweeps" / f"{path}.yaml"
    try:
        data = read_yaml(p)
    except ConfigError as err:
        raise SweepSpecError(str(err)) from None
    data = _relative_to(data, p.parent)
    if agents is not None and isinstance(data, dict):
        data = {**data, "agents": agents}
    return parse_spec(data, str(p))


def _relative_to(data: Any, folder: Path) -> Any:
    """The spec with relative YAML paths of ``base.scenario/costs/memory`` and the agents' ``*_path``
    options (a trained model's file) taken from the spec's folder."""
    if isinstance(data, dict) and isinstance(data.get("agents"), list):
        data = {**data, "agents": [
            {k: str(folder / v) if k.endswith("_path") and isinstance(v, str) and not Path(v).is_absolute() else v
             for k, v in entry.items()} if isinstance(entry, dict) else entry for entry in data["agents"]]}
    base = data.get("base") if isinstance(data, dict) else None
    if not isinstance(base, dict):
        return data
    fixed = dict(base)
    for key in ("scenario", "costs", "memory", "aids"):
        value = base.get(key)
        if isinstance(value, str) and Path(value).suffix in (".yaml", ".yml") and not Path(value).is_absolute():
            fixed[key] = str(folder / value)
    return {**data, "base": fixed}


def _check_horizon_fits(own: dict[str, Any], schedule: dict[str, Any], horizon: Horizon, gaps_in_base: bool,
                        source: str) -> None:
    """Refuse a ``horizon`` that breaks a schedule valid without it, naming the horizon's field: its
    sessions against a gap_h list (from the base's schedule or the scenario's), else the fault."""
    gaps = schedule.get("gap_h")
    n = horizon.sessions
    if n is not None and isinstance(gaps, list) and len(gaps) != n - 1:
        whence = "base.schedule.gap_h" if gaps_in_base else "the scenario's schedule.gap_h"
        raise SweepSpecError(
            f"{source}: horizon.sessions: {n} sessions need {n - 1} gap(s) between them, but {whence} lists "
            f"{len(gaps)}: set horizon.sessions to {len(gaps) + 1}, or give base.schedule.gap_h as one number or "
            f"a list of {n - 1}")
    try:
        ScheduleSettings.model_validate(schedule)
    except ValidationError as err:
        try:
            ScheduleSettings.model_validate(own)
        except ValidationError:
            return  # the schedule is at fault without the horizon too: told as the schedule's, later
        raise SweepSpecError(format_validation_error(err, f"{source}: horizon (laid over the schedule)")) from None


def base_settings(spec: SweepSpec, source: str = "<sweep spec>") -> dict[str, Any]:
    """The base setting resolved into plain dicts per section (what overrides apply to)."""
    b = spec.base
    try:
        scenario = load_settings(ScenarioSettings, "tidepool_logbook" if b.scenario is None else b.scenario)
        costs = load_settings(CostSettings, "average_skilled_mouse" if b.costs is None else b.costs)
        memory = load_settings(MemorySettings, b.memory)
        aids = load_settings(AidSettings, b.aids)
    except ConfigError as err:
        raise SweepSpecError(f"{source}: base: {err}") from None
    schedule = {**scenario.schedule.model_dump(), **(b.schedule or {})}
    if spec.horizon is not None:
        own = dict(schedule)
        schedule.update({k: v for k, v in spec.horizon.model_dump().items() if v is not None})
        _check_horizon_fits(own, schedule, spec.horizon, "gap_h" in (b.schedule or {}), source)
    scen = scenario.model_dump()
    scen.pop("schedule")
    out = {
        "scenario": scen,
        "costs": costs.model_dump(),
        "memory": memory.model_dump(),
        "schedule": schedule,
        "observe_recall": b.observe_recall,
        "target_encoding": b.target_encoding,
    }
    # the aids section only when the spec uses it, so aid-free specs keep their run ids
    if b.aids is not None or any(p.split(".")[0] == "aids" for p in spec.vary.parameters):
        out["aids"] = aids.model_dump()
    return out


def _step(node: Any, key: str, where: str, done: str) -> Any:
    if isinstance(node, dict):
        if key not in node:
            raise SweepSpecError(f"{where}: unknown setting {key!r} under {done}; known: {sorted(node)}")
        return node[key]
    if isinstance(node, list):
        if not key.isdigit() or int(key) >= len(node):
            raise SweepSpecError(f"{where}: {done} is a list of {len(node)}; {key!r} is not an index in it")
        return node[int(key)]
    raise SweepSpecError(f"{where}: {done} is a value, not a group of settings; cannot go on to {key!r}")


def resolve_path(settings: dict[str, Any], path: str, where: str) -> Any:
    """Current value at dotted ``path`` (``costs.klm.keystroke_s``); unknown paths raise naming it."""
    parts = path.split(".")
    if parts[0] not in SECTIONS:
        raise SweepSpecError(f"{where}: a dotted path starts with one of {list(SECTIONS)}, got {parts[0]!r}")
    if len(parts) < 2 or any(p == "" for p in parts):
        raise SweepSpecError(f"{where}: {path!r} is not a dotted path to one setting")
    node: Any = settings
    for i, key in enumerate(parts):
        node = _step(node, key, where, ".".join(parts[:i]) or "the settings")
    listed = (parts[0] == "schedule" and parts[-1] == "gap_h") or (parts[0] == "aids" and parts[-1] == "commands")
    if isinstance(node, (dict, list)) and not listed:
        raise SweepSpecError(f"{where}: {path!r} is a group of settings, not one setting")
    return node


def apply_overrides(settings: dict[str, Any], point: dict[str, Any]) -> dict[str, Any]:
    """A deep copy of ``settings`` with each dotted path of ``point`` set to its value."""
    out = copy.deepcopy(settings)
    for path, value in point.items():
        resolve_path(out, path, f"override {path}")
        parts = path.split(".")
        node: Any = out
        for key in parts[:-1]:
            node = node[int(key)] if isinstance(node, list) else node[key]
        last = parts[-1]
        if isinstance(node, list):
            node[int(last)] = value
        else:
            node[last] = value
    return out
