"""Which interface aid makes hotkeys pay off soonest, and for whom?

An aid study (``configs/studies/*.yaml``) names a base world, the aids to compare (presets of
``configs/aids/`` or mappings of :class:`~shortcut_gym.envs.aids.AidSettings`), a population axis
(one dotted setting and its values, e.g. the typist class ``costs.klm.typist`` or the retrieval
threshold ``memory.threshold``), the simulated users' agents (the planner, learning models, fixed
baselines) and the users' seeds. Every aid runs on the same users as the aid-free world (same
seeds: same schedules and same uniforms), so each user's saving is a paired difference.

Per (population value, agent, aid) the ranking table reports:

* ``saved_s``: mean over users of (total time without the aid - total time with it), seconds over
  the whole horizon; the aid's own costs (its operators) are inside the totals. ``saved_se_s`` is
  its standard error over users.
* ``pays_share``: share of users whose total time is lower with the aid.
* ``first_hotkey_session``: mean 1-based session of the user's first recalled hotkey, over users
  who recall one (``hotkey_users_share`` of them); ``base_first_hotkey_session`` the same without the aid.
  Sessions are the resolution of the per-user sums; ``first_session_hotkey_share`` (share of the
  first session's trials that recall a hotkey, with and without the aid) shows earlier adoption
  within the first session.
* ``rank``: 1 = the aid that saves the most for that population and agent.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from pydantic import Field, ValidationError

from shortcut_gym.agents.planner.memory_model import planner_memory_refusal
from shortcut_gym.agents.registry import AGENTS
from shortcut_gym.envs.aids import AidSettings
from shortcut_gym.envs.config import format_validation_error, load_settings, read_yaml
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.kernel import OUT_HOTKEY
from shortcut_gym.envs.strict import StrictModel
from shortcut_gym.lab.sweep.batch import BlockSums, simulate_users
from shortcut_gym.lab.sweep.plan import agent_specs, world_from_settings
from shortcut_gym.lab.sweep.spec import (
    MAX_USERS,
    AgentEntry,
    BaseSetting,
    SeedBlock,
    SweepSpec,
    apply_overrides,
    base_settings,
    resolve_path,
)

#: Name of the aid-free reference world in the outputs.
NO_AID = "none"


class PopulationAxis(StrictModel):
    """The population axis: one dotted setting (``costs.klm.typist``) and its values."""

    path: str = Field(min_length=3)
    values: list[float | int | str] = Field(min_length=1)


class StudyAgent(AgentEntry):
    """An agent entry; ``users`` (optional) runs it on the first that many of the study's users only
    (the planner steps one Python object per user, so it may get fewer)."""

    users: int | None = Field(default=None, ge=1)


class AidStudySpec(StrictModel):
    """A whole aid study (see the module docstring)."""

    name: str = Field(min_length=1, pattern=r"^[A-Za-z0-9_.-]+$")
    description: str = ""
    base: BaseSetting = BaseSetting()
    aids: dict[str, str | dict[str, Any]] = Field(min_length=1)
    population: PopulationAxis
    agents: list[StudyAgent] = Field(min_length=1)
    users: SeedBlock
    threads: int = Field(default=1, ge=1, le=64)


def parse_study(data: Any, source: str = "<aid study>") -> tuple[AidStudySpec, dict[str, AidSettings]]:
    """Validate a study mapping; every aid, the population path and the agents are checked here."""
    if not isinstance(data, dict):
        raise ConfigError(f"{source}: an aid study must be a mapping, got {type(data).__name__}")
    try:
        spec = AidStudySpec.model_validate(data)
    except ValidationError as err:
        raise ConfigError(format_validation_error(err, source)) from None
    if NO_AID in spec.aids:
        raise ConfigError(f"{source}: aids: {NO_AID!r} names the aid-free reference, which every study has; "
                          "give the aids other names")
    aids = {}
    for label, entry in spec.aids.items():
        try:
            aids[label] = load_settings(AidSettings, entry)
        except ConfigError as err:
            raise ConfigError(f"{source}: aids.{label}: {err}") from None
        if not aids[label].any_on:
            raise ConfigError(f"{source}: aids.{label}: switches no aid on (every section's commands is 'none')")
    sweep = _as_sweep(spec)
    settings = base_settings(sweep, source)
    if spec.population.path.split(".")[0] == "aids":
        raise ConfigError(f"{source}: population.path: the population axis cannot be an aid setting "
                          "(the aids are the other axis)")
    resolve_path(settings, spec.population.path, f"{source}: population.path")
    agents = agent_specs(sweep, source)
    for value in spec.population.values:
        for label, aid in aids.items():
            _world(settings, spec.population.path, value, aid, f"{source}: aids.{label} at {value!r}")
    _refuse_planner_memory(spec, settings, agents, source)
    return spec, aids


def _refuse_planner_memory(spec: AidStudySpec, settings: dict[str, Any], agents: list[tuple[str, dict[str, Any]]],
                           source: str) -> None:
    """Refuse, before anything is simulated, a planner agent on a population value whose world's
    memory kind the planner does not model (the aids leave the memory as it is)."""
    planners = [label for label, agent in agents if AGENTS[agent["name"]].needs_planner]
    if not planners:
        return
    path = spec.population.path
    for value in spec.population.values:
        world = _world(settings, path, value, None, f"{source}: {path}={value!r}")
        for label in planners:
            refusal = planner_memory_refusal(world, f"{source}: agent {label!r} at {path}={value!r}")
            if refusal is not None:
                raise ConfigError(refusal)


def load_study(path: str | Path) -> tuple[AidStudySpec, dict[str, AidSettings]]:
    """Read a study YAML (a bare name looks in the bundled ``configs/studies``)."""
    p = Path(path)
    if not p.exists() and p.suffix == "" and "/" not in str(path):
        from shortcut_gym.envs.config import bundled_config_dir

        p = bundled_config_dir() / "studies" / f"{path}.yaml"
    return parse_study(read_yaml(p), str(p))


def _as_sweep(spec: AidStudySpec) -> SweepSpec:
    agents = [AgentEntry(**a.model_dump(exclude={"users"})) for a in spec.agents]
    return SweepSpec(name=spec.name, base=spec.base, agents=agents, seeds=spec.users)


def _world(settings: dict[str, Any], path: str, value: Any, aid: AidSettings | None, where: str) -> Any:
    point = apply_overrides(settings, {path: value})
    point["aids"] = None if aid is None else aid.model_dump()
    try:
        return world_from_settings(point)
    except ConfigError as err:
        raise ConfigError(f"{where}: {err}") from None


def user_outcomes(sums: BlockSums) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per user of a simulation: total seconds, 1-based session of the first recalled hotkey (NaN if
    none) and the share of the first session's trials that recalled a hotkey."""
    total = sums.time_s.sum(axis=1)
    hot = sums.outcomes[:, :, OUT_HOTKEY] > 0
    first = np.where(hot.any(axis=1), hot.argmax(axis=1) + 1.0, np.nan)
    early = sums.outcomes[:, 0, OUT_HOTKEY] / np.maximum(sums.trials[:, 0], 1)
    return total, first, early


def _mean(x: np.ndarray) -> float:
    return float(np.nanmean(x)) if np.isfinite(x).any() else math.nan


def run_study(spec: AidStudySpec, aids: dict[str, AidSettings], threads: int | None = None) -> pd.DataFrame:
    """Simulate every (population value, agent, aid or none) and return the ranking table."""
    sweep = _as_sweep(spec)
    settings = base_settings(sweep)
    agents = agent_specs(sweep)
    _refuse_planner_memory(spec, settings, agents, f"aid study {spec.name!r}")
    seeds = sweep.seed_list()
    if len(seeds) > MAX_USERS:
        raise ConfigError(f"users: at most {MAX_USERS:,} simulated users")
    n_threads = spec.threads if threads is None else int(threads)
    counts = {label: min(e.users or len(seeds), len(seeds)) for (label, _), e in zip(agents, spec.agents, strict=True)}
    jobs = [(value, label, agent, name, aid) for value in spec.population.values for label, agent in agents
            for name, aid in [(NO_AID, None), *aids.items()]]

    def one(job: tuple) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        value, label, agent, name, aid = job
        world = _world(settings, spec.population.path, value, aid, f"aids.{name} at {value!r}")
        return user_outcomes(simulate_users(world, agent, seeds[:counts[label]]))

    if n_threads > 1:  # the compiled loops release the GIL; jobs are independent
        with ThreadPoolExecutor(max_workers=n_threads) as pool:
            results = list(pool.map(one, jobs))
    else:
        results = [one(j) for j in jobs]
    got = {(j[0], j[1], j[3]): r for j, r in zip(jobs, results, strict=True)}
    rows = []
    for value in spec.population.values:
        for label, _ in agents:
            base_total, base_first, base_early = got[(value, label, NO_AID)]
            for name in aids:
                total, first, early = got[(value, label, name)]
                saved = base_total - total
                rows.append({
                    spec.population.path: value, "agent": label, "aid": name, "users": len(saved),
                    "saved_s": float(saved.mean()),
                    "saved_se_s": float(saved.std(ddof=1) / math.sqrt(len(saved))) if len(saved) > 1 else math.nan,
                    "pays_share": float((saved > 0).mean()),
                    "first_hotkey_session": _mean(first),
                    "base_first_hotkey_session": _mean(base_first),
                    "hotkey_users_share": float(np.isfinite(first).mean()),
                    "first_session_hotkey_share": float(early.mean()),
                    "base_first_session_hotkey_share": float(base_early.mean()),
                    "base_time_s": float(base_total.mean()),
                })
    table = pd.DataFrame(rows)
    keys = [spec.population.path, "agent"]
    table["rank"] = table.groupby(keys, sort=False)["saved_s"].rank(ascending=False, method="min").astype(int)
    return table.sort_values([*keys, "rank"], kind="stable").reset_index(drop=True)

