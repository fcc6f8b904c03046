"""From a validated spec to the list of runs: design point x agent, each with the same seeds.

A run is plain data (JSON-able): its index, a content-derived id, the point (dotted path ->
value), the agent spec and label, the seeds and the full settings after the overrides. Every
point's world and every agent is built once here, so a bad value fails before anything is
written.
"""

from __future__ import annotations

import difflib
import hashlib
import json
from collections import OrderedDict
from typing import Any

from shortcut_gym.agents.planner.memory_model import planner_memory_refusal
from shortcut_gym.agents.registry import AGENTS, agent_from_spec, check_spec
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World, make_world
from shortcut_gym.lab.simulate import label_of
from shortcut_gym.lab.sweep.design import design_points
from shortcut_gym.lab.sweep.spec import SweepSpec, SweepSpecError, apply_overrides, base_settings


def world_from_settings(settings: dict[str, Any]) -> World:
    """The world of a run's settings (the section dicts of :func:`base_settings`)."""
    return make_world(
        scenario=settings["scenario"], costs=settings["costs"], memory=settings["memory"],
        schedule=settings["schedule"], observe_recall=settings["observe_recall"],
        target_encoding=settings["target_encoding"], aids=settings.get("aids"),
    )


#: Worlds kept by :func:`run_world` (a sweep computes every agent of a point in a row).
MAX_WORLDS = 8
_worlds: OrderedDict[str, World] = OrderedDict()


def run_world(settings: dict[str, Any]) -> World:
    """:func:`world_from_settings`, built once for equal settings in this process (worlds are frozen;
    the runs of one point share it, skipping the settings' validation for all but the first)."""
    key = _canonical(settings)
    world = _worlds.get(key)
    if world is None:
        world = _worlds[key] = world_from_settings(settings)
        while len(_worlds) > MAX_WORLDS:
            _worlds.popitem(last=False)
    else:
        _worlds.move_to_end(key)
    return world


def _canonical(data: Any) -> str:
    return json.dumps(data, sort_keys=True, separators=(",", ":"), default=str)


def digest(data: Any) -> str:
    """SHA-1 of the canonical JSON of ``data``."""
    return hashlib.sha1(_canonical(data).encode()).hexdigest()


def agent_specs(spec: SweepSpec, source: str = "<sweep spec>") -> list[tuple[str, dict[str, Any]]]:
    """(label, agent spec dict) per agent entry; unknown agents or parameters raise naming the entry."""
    out: list[tuple[str, dict[str, Any]]] = []
    seen: dict[str, int] = {}
    for i, entry in enumerate(spec.agents):
        extra = {k: v for k, v in entry.model_dump().items() if k not in ("name", "params", "label")}
        agent_spec = {"name": entry.name, "params": dict(entry.params), **extra}
        where = f"{source}: agents[{i}]"
        try:
            check_spec(agent_spec, where, file=True)  # an unknown key named as such, with what is known
            agent = agent_from_spec(agent_spec, source=where)
        except (ValueError, TypeError) as err:
            raise SweepSpecError(str(err)) from None
        label = entry.label or label_of({"name": agent.name, "params": dict(entry.params)})
        if label in seen:
            raise SweepSpecError(f"{source}: agents[{i}]: label {label!r} repeats agents[{seen[label]}]; "
                                 "give one of them a label")
        seen[label] = i
        out.append((label, agent_spec))
    check_role_labels(spec, [label for label, _ in out], source)
    return out


def check_role_labels(spec: SweepSpec, labels: list[str], source: str = "<sweep spec>") -> None:
    """Refuse an ``outputs.reference_agent`` or ``outputs.break_even.learner`` that names none of the
    agent ``labels``, naming the field, the label and the labels (with the closest one, if any)."""
    be = spec.outputs.break_even
    for field, label in (("outputs.reference_agent", spec.outputs.reference_agent),
                         ("outputs.break_even.learner", be.learner if be is not None else None)):
        if label is None or label in labels:
            continue
        close = difflib.get_close_matches(label, labels, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise SweepSpecError(f"{source}: {field}: {label!r} is the label of no agent of the sweep; its agent "
                             f"labels: {labels}{hint}")


def plan_runs(spec: SweepSpec, source: str = "<sweep spec>") -> list[dict[str, Any]]:
    """Every run of the sweep, in a fixed order (points outer, agents inner)."""
    base = base_settings(spec, source)
    agents = agent_specs(spec, source)
    seeds = spec.seed_list()
    runs: list[dict[str, Any]] = []
    for p, point in enumerate(design_points(spec.vary)):
        settings = apply_overrides(base, point)
        where = ", ".join(f"{k}={v!r}" for k, v in point.items()) or "the base setting"
        try:
            world = world_from_settings(settings)
        except ConfigError as err:
            raise SweepSpecError(f"{source}: vary point {p} ({where}): {err}") from None
        for label, agent_spec in agents:
            if AGENTS[agent_spec["name"]].needs_planner:
                refusal = planner_memory_refusal(world, f"{source}: vary point {p} ({where}): agent {label!r}")
                if refusal is not None:
                    raise SweepSpecError(refusal)
        for label, agent_spec in agents:
            body = {"point": point, "agent": agent_spec, "label": label, "seeds": seeds, "settings": settings,
                    "trial_tables": spec.outputs.trial_tables}
            index = len(runs)
            runs.append({"index": index, "point_index": p, "run_id": f"r{index:04d}-{digest(body)[:8]}", **body})
    return runs


def plan_digest(runs: list[dict[str, Any]]) -> str:
    """Digest of the whole plan: a folder may only be resumed by the same plan."""
    return digest([r["run_id"] for r in runs] + [r["settings"] for r in runs[:1]])
