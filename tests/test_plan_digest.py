"""The plan cache is keyed by the world's plan digest: what changes a plan (every number the
simulator reads), not the text that only names things (scenario name and description, command
names, hotkey spellings of the same length, menu titles, preset names). Two worlds differing only
in text share one plan; two differing in any number of any field family do not."""

from __future__ import annotations

import copy
from typing import Any

import pytest

from shortcut_gym.agents.planner import cache
from shortcut_gym.envs import make_world
from shortcut_gym.envs.world import World

# An invented scenario: a beekeeper's hive-inspection log, 5 commands in 2 menus.
SCENARIO: dict[str, Any] = {
    "name": "hive_log", "description": "Inspect hives, log frames and queens.",
    "menus": [
        {"title": "Hive", "items": [{"name": "Open hive", "hotkey": "Ctrl+O", "weight": 0.4},
                                    {"name": "Count frames", "hotkey": "Ctrl+F", "weight": 0.25},
                                    {"name": "Seal hive", "hotkey": "Ctrl+Shift+S", "weight": 0.1}]},
        {"title": "Queen", "items": [{"name": "Spot queen", "hotkey": "Alt+Q", "weight": 0.15},
                                     {"name": "Mark queen", "hotkey": "Alt+M", "weight": 0.1}]},
    ],
    "schedule": {"sessions": 2, "trials_per_session": 6, "gap_h": 5.0, "trial_interval_s": 30.0},
}
AIDS: dict[str, Any] = {"name": "hive_aids", "key_labels": {"commands": ["Count frames"]},
                        "nudge": {"commands": ["Spot queen"], "reading_s": 1.2}}


def _world(scenario: dict | None = None, costs: str | dict = "average_skilled_mouse", memory: dict | None = None,
           aids: dict | None = None, schedule: dict | None = None, observe_recall: bool = False) -> World:
    return make_world(scenario=scenario or SCENARIO, costs=costs, memory=memory, aids=aids or AIDS,
                      schedule=schedule, observe_recall=observe_recall)


def _renamed() -> tuple[dict, dict]:
    """The scenario and aids with every text changed and no number: names, titles, hotkeys of as many keys."""
    sc = copy.deepcopy(SCENARIO)
    sc["name"], sc["description"] = "apiary_book", "Another text entirely."
    new = {"Open hive": "Lift lid", "Count frames": "Tally combs", "Seal hive": "Close lid",
           "Spot queen": "Find queen", "Mark queen": "Dot queen"}
    keys = {"Ctrl+O": "Ctrl+L", "Ctrl+F": "Ctrl+T", "Ctrl+Shift+S": "Ctrl+Alt+C", "Alt+Q": "Alt+F",
            "Alt+M": "Alt+D"}  # as many keys each
    for m in sc["menus"]:
        m["title"] = m["title"].upper()
        for item in m["items"]:
            item["name"] = new[item["name"]]
            item["hotkey"] = keys[item["hotkey"]]
    aids = copy.deepcopy(AIDS)
    aids["name"] = "other_aids_name"
    aids["key_labels"]["commands"] = [new[n] for n in aids["key_labels"]["commands"]]
    aids["nudge"]["commands"] = [new[n] for n in aids["nudge"]["commands"]]
    return sc, aids


def _costs(**change: Any) -> dict:
    from shortcut_gym.envs.config import load_settings
    from shortcut_gym.envs.costs import CostSettings

    base = load_settings(CostSettings, "average_skilled_mouse").model_dump(mode="json")
    for path, value in change.items():
        section, field = path.split("__")
        base[section][field] = value
    return base


def _text_only_variants() -> dict[str, World]:
    sc, aids = _renamed()
    named_costs = _costs()
    named_costs["name"] = "my_own_cost_preset"
    return {"all text": _world(sc, aids=aids), "costs preset name": _world(costs=named_costs),
            "description only": _world({**SCENARIO, "description": "changed"}),
            "K spelled out": _world(costs=_costs(klm__typist="good_typist", klm__keystroke_s=0.20))}


def _moved(sc: dict, menu: int, a: int, b: int) -> dict:
    out = copy.deepcopy(sc)
    items = out["menus"][menu]["items"]
    items[a], items[b] = items[b], items[a]
    return out


def _weighted(w: float) -> dict:
    out = copy.deepcopy(SCENARIO)
    out["menus"][0]["items"][0]["weight"] = w
    return out


def _longer_hotkey() -> dict:
    out = copy.deepcopy(SCENARIO)
    out["menus"][1]["items"][0]["hotkey"] = "Ctrl+Alt+Q"  # 3 keys, was 2
    return out


def _swapped_names() -> tuple[dict, dict]:
    """Same arrays, the two queen commands' names swapped: the aid named 'Spot queen' moves command."""
    out = copy.deepcopy(SCENARIO)
    items = out["menus"][1]["items"]
    items[0]["name"], items[1]["name"] = items[1]["name"], items[0]["name"]
    items[0]["weight"], items[1]["weight"] = 0.125, 0.125  # equal weights: the arrays alone cannot tell
    base = copy.deepcopy(SCENARIO)
    base["menus"][1]["items"][0]["weight"] = base["menus"][1]["items"][1]["weight"] = 0.125
    return base, out


NUMERIC = {
    "commands: item order": lambda: _world(_moved(SCENARIO, 0, 0, 1)),
    "commands: a weight": lambda: _world(_weighted(0.5)),
    "commands: hotkey length": lambda: _world(_longer_hotkey()),
    "costs: keystroke": lambda: _world(costs=_costs(klm__keystroke_s=0.31)),
    "costs: menu search": lambda: _world(costs=_costs(menu__search_slope_s_per_item=0.14)),
    "costs: encoding": lambda: _world(costs=_costs(learn__encoding_s=0.9)),
    "memory: threshold": lambda: _world(memory={"threshold": -2.5}),
    "memory: decay": lambda: _world(memory={"decay": 0.45}),
    "aids: nudge seconds": lambda: _world(aids={**AIDS, "nudge": {**AIDS["nudge"], "reading_s": 2.0}}),
    "aids: labels on another command": lambda: _world(aids={**AIDS, "key_labels": {"commands": ["Seal hive"]}}),
    "aids: one more aid": lambda: _world(aids={**AIDS, "menu_delay": {"commands": "all"}}),
    "schedule: gap": lambda: _world(schedule={"gap_h": 9.0}),
    "schedule: trials": lambda: _world(schedule={"trials_per_session": 7}),
    "observation: recall observed": lambda: _world(observe_recall=True),
}


@pytest.mark.parametrize("variant", sorted(_text_only_variants()))
def test_worlds_differing_only_in_text_share_one_plan(variant: str) -> None:
    base, other = _world(), _text_only_variants()[variant]
    assert base.digest() != other.digest()  # the full digest tells them apart (world.json, model files)
    assert base.plan_digest() == other.plan_digest()
    cache.clear_plans()
    made = cache.plans_made()
    first = cache.cached_plan(base, base.horizon, 6, None, 3, select_users=4)
    second = cache.cached_plan(other, other.horizon, 6, None, 3, select_users=4)
    assert cache.plans_made() == made + 1 and second is first


@pytest.mark.parametrize("variant", sorted(NUMERIC))
def test_worlds_differing_in_any_number_are_planned_apart(variant: str) -> None:
    base, other = _world(), NUMERIC[variant]()
    assert base.plan_digest() != other.plan_digest()
    assert cache.plan_key(base, 12, 6, None, 3, 4) != cache.plan_key(other, 12, 6, None, 3, 4)


def test_an_aid_named_by_command_follows_the_command_not_its_position() -> None:
    base, swapped = _swapped_names()
    a, b = _world(base), _world(swapped)
    assert (a.commands.probability == b.commands.probability).all()  # the arrays are alike
    assert a.plan_digest() != b.plan_digest()  # but the nudge is on another command
    sc, aids = _renamed()
    assert _world(sc, aids=aids).plan_digest() == _world().plan_digest()


def _chooser_key(world: World) -> tuple:
    from shortcut_gym.agents.registry import make_agent

    return make_agent("planned_choice", world=world).plan_key()


@pytest.mark.parametrize("variant", sorted(_text_only_variants()))
def test_planned_choice_logged_values_are_keyed_by_the_plan_digest(variant: str) -> None:
    """planned_choice's cache of logged action values follows the plan: text-only changes share it."""
    assert _chooser_key(_world()) == _chooser_key(_text_only_variants()[variant])


@pytest.mark.parametrize("variant", ["memory: decay", "costs: keystroke", "aids: one more aid", "schedule: gap"])
def test_planned_choice_logged_values_differ_for_any_number(variant: str) -> None:
    assert _chooser_key(_world()) != _chooser_key(NUMERIC[variant]())
