"""Bad settings are refused up front with the field named; YAML quirks are read as meant."""

from __future__ import annotations

import copy
from decimal import Decimal
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from shortcut_gym.envs.config import load_settings, parse_yaml, read_yaml
from shortcut_gym.envs.costs import CostSettings
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ActionError, ConfigError, UsageError
from shortcut_gym.envs.memory import MemorySettings
from shortcut_gym.envs.task import ScenarioSettings, canonical_hotkey
from shortcut_gym.lab.sweep.spec import SweepSpecError, parse_spec

NAN, INF = float("nan"), float("inf")


@pytest.mark.parametrize(("model", "data", "field"), [
    (CostSettings, {"fitts": {"intercept_s": NAN}}, "fitts.intercept_s"),
    (CostSettings, {"klm": {"point_s": INF}}, "klm.point_s"),
    (CostSettings, {"klm": {"keystroke_s": True}}, "keystroke_s"),
    (CostSettings, {"klm": {"home_s": -INF}}, "klm.home_s"),
    (CostSettings, {"menu": {"item_height_px": NAN}}, "menu.item_height_px"),
    (CostSettings, {"learn": {"encoding_s": INF}}, "learn.encoding_s"),
    (CostSettings, {"errors": {"undo_keystrokes": False}}, "undo_keystrokes"),
    (MemorySettings, {"latency_factor_s": INF}, "latency_factor_s"),
    (MemorySettings, {"threshold": NAN}, "threshold"),
    (MemorySettings, {"threshold": -INF}, "threshold"),
    (MemorySettings, {"decay": True}, "decay"),
    (MemorySettings, {"weights": {"learn": INF}}, "weights.learn"),
    (MemorySettings, {"recent_traces": True}, "recent_traces"),
])
def test_non_finite_and_boolean_numbers_are_refused_naming_the_field(model, data, field) -> None:
    with pytest.raises(ConfigError, match=field.split(".")[-1]):
        load_settings(model, data)


def _scenario(**schedule: Any) -> dict[str, Any]:
    return {"name": "t", "menus": [{"title": "Log", "items": [{"name": "Add", "hotkey": "Ctrl+A"},
                                                               {"name": "Tag", "hotkey": "Ctrl+T"}]}],
            "schedule": schedule}


@pytest.mark.parametrize(("schedule", "field"), [
    ({"trial_interval_s": INF}, "trial_interval_s"),
    ({"trial_interval_s": NAN}, "trial_interval_s"),
    ({"gap_h": INF}, "gap_h"),
    ({"sessions": 10**9}, "exceeds the limit"),
    ({"sessions": 2000, "trials_per_session": 1000}, "exceeds the limit"),
    ({"sessions": True}, "sessions"),
    ({"sessions": 2.5}, "sessions"),
])
def test_schedule_values_and_size_limits(schedule, field) -> None:
    with pytest.raises(ConfigError, match=field):
        load_settings(ScenarioSettings, _scenario(**schedule))


@pytest.mark.parametrize(("a", "b"), [
    ("Ctrl+Shift+K", "Shift+Ctrl+K"), ("Ctrl+k", "Ctrl+K"), ("ctrl+K", "Ctrl+K"),
    ("Alt+Shift+Ctrl+x", "Ctrl+Alt+Shift+X"),
])
def test_hotkeys_that_are_the_same_chord_are_duplicates(a, b) -> None:
    assert canonical_hotkey(a) == canonical_hotkey(b)
    data = _scenario()
    data["menus"][0]["items"] = [{"name": "Add", "hotkey": a}, {"name": "Tag", "hotkey": b}]
    with pytest.raises(ConfigError, match="is given to both"):
        load_settings(ScenarioSettings, data)


@pytest.mark.parametrize(("hotkey", "message"), [
    ("Ctrl+Ctrl+K", "twice"), ("Hyper+K", "not one of"), ("Ctrl+", "key"), ("Ctrl+KK", "key"), ("Ctrl+F99", "key"),
])
def test_bad_hotkeys_are_refused(hotkey, message) -> None:
    data = _scenario()
    data["menus"][0]["items"][0]["hotkey"] = hotkey
    with pytest.raises(ConfigError, match=message):
        load_settings(ScenarioSettings, data)


@pytest.mark.parametrize("name", ["", " ", "\t", "   "])
def test_blank_command_names_are_refused(name) -> None:
    data = _scenario()
    data["menus"][0]["items"][0]["name"] = name
    with pytest.raises(ConfigError, match="name"):
        load_settings(ScenarioSettings, data)


@pytest.mark.parametrize("text", ["a: 1\na: 2\n", "klm:\n  point_s: 1\n  point_s: 2\n", "- {x: 1, x: 1}\n"])
def test_duplicate_yaml_keys_are_refused(text) -> None:
    with pytest.raises(ConfigError, match="given twice"):
        parse_yaml(text, "f.yaml")


@pytest.mark.parametrize(("text", "value"), [("1e-1", 0.1), ("2E3", 2000.0), ("-1.5e+2", -150.0), ("3", 3),
                                             ("'1e-1'", "1e-1"), ("1.0e-1", 0.1)])
def test_yaml_numbers_in_exponent_form_are_numbers(text, value) -> None:
    got = parse_yaml(f"v: {text}", "f.yaml")["v"]
    assert got == value and type(got) is type(value)


@pytest.mark.parametrize("kind", ["costs", "scenarios", "memory", "sweep", "agent"])
def test_every_config_kind_refuses_duplicates_and_bad_encoding(kind, tmp_path: Path) -> None:
    path = tmp_path / f"{kind}.yaml"
    path.write_text("name: a\nname: b\n")
    with pytest.raises(ConfigError, match="given twice"):
        _load(kind, path)
    path.write_bytes(b"name: caf\xe9\n")
    with pytest.raises(ConfigError, match=f"{kind}.yaml: not UTF-8"):
        _load(kind, path)


def _load(kind: str, path: Path) -> Any:
    from shortcut_gym.agents.registry import agent_from_spec
    from shortcut_gym.lab.sweep.spec import load_spec

    models = {"costs": CostSettings, "scenarios": ScenarioSettings, "memory": MemorySettings}
    if kind in models:
        return load_settings(models[kind], path)
    return load_spec(path) if kind == "sweep" else agent_from_spec(path)


GOOD: dict[str, Any] = {"name": "v", "base": {"schedule": {"sessions": 1, "trials_per_session": 4}},
                        "vary": {"parameters": {"costs.klm.keystroke_s": {"values": [0.1, 0.2]}}},
                        "agents": [{"name": "always_menu"}], "seeds": {"count": 1}}


@pytest.mark.parametrize(("change", "message"), [
    ({"vary": {"parameters": {"costs.klm.keystroke_s": {"low": 0.1, "high": 1.0, "steps": 1001},
                              "costs.learn.encoding_s": {"low": 1.0, "high": 2.0, "steps": 1000}}}}, "limit"),
    ({"vary": {"design": "random", "points": 10**6, "parameters": {"costs.klm.keystroke_s": {"low": 0.1, "high": 1}}}},
     "limit"),
    ({"vary": {"parameters": {"costs.klm.keystroke_s": {"low": NAN, "high": 1.0, "steps": 2}}}}, "finite"),
    ({"vary": {"parameters": {"costs.klm.keystroke_s": {"values": [INF]}}}}, "keystroke_s"),
    ({"agents": [{"name": "learn_first_k", "params": {"k": 1.5}}]}, "whole number"),
    ({"agents": [{"name": "learn_first_k", "params": {"k": True}}]}, "must be a number"),
    ({"agents": [{"name": "no_such_agent"}]}, "unknown agent"),
    ({"horizon": {"sessions": 10**9}}, "exceeds the limit"),
    ({"seeds": {"count": True}}, "count"),
])
def test_sweep_specs_are_checked_before_any_run(change, message) -> None:
    from shortcut_gym.lab.sweep.plan import plan_runs

    spec = {**copy.deepcopy(GOOD), **change}
    with pytest.raises(SweepSpecError, match=message):
        plan_runs(parse_spec(spec))


def test_exponent_form_sweep_values_are_numbers_end_to_end(tmp_path: Path) -> None:
    from shortcut_gym.lab.sweep.runner import run_sweep

    path = tmp_path / "s.yaml"
    path.write_text("name: e\nbase: {schedule: {sessions: 1, trials_per_session: 4}}\n"
                    "vary: {parameters: {costs.klm.keystroke_s: {values: [1e-1, 2e-1]}}}\n"
                    "agents: [{name: always_menu}]\nseeds: {count: 1}\noutputs: {plots: false}\n")
    assert read_yaml(path)["vary"]["parameters"]["costs.klm.keystroke_s"]["values"] == [0.1, 0.2]
    report = run_sweep(path, tmp_path / "out", workers=1, progress=False)
    assert report.computed == 2 and not report.failed


@pytest.mark.parametrize("action", [True, False, 1.0, 0.0, Decimal("1"), "1", INF, NAN, np.float64(1.0), np.bool_(True),
                                    None, [1], 3, -1, np.int64(7)])
def test_actions_must_be_integers_in_range(action) -> None:
    env = CommandSelectionEnv(schedule={"sessions": 1, "trials_per_session": 3})
    env.reset(seed=0)
    with pytest.raises(ActionError):
        env.step(action)


@pytest.mark.parametrize("action", [1, np.int64(1), np.int8(2), np.uint8(0), np.array(1)])
def test_integer_actions_of_any_integer_type_are_accepted(action) -> None:
    env = CommandSelectionEnv(schedule={"sessions": 1, "trials_per_session": 3})
    env.reset(seed=0)
    _, reward, *_ = env.step(action)
    assert np.isfinite(reward) and reward < 0


@pytest.mark.parametrize("mode", ["ansi", "rgb_array"])
def test_render_or_step_before_reset_is_a_usage_error(mode) -> None:
    env = CommandSelectionEnv(schedule={"sessions": 1, "trials_per_session": 3}, render_mode=mode)
    with pytest.raises(UsageError, match="call reset"):
        env.render()
    with pytest.raises(UsageError, match="call reset"):
        env.step(0)


@pytest.mark.parametrize(("change", "message"), [
    ({"seeds": {"first": 2**63 - 1, "count": 2}}, "exceeds"),
    ({"seeds": [0, 2**64]}, "seeds must be in"),
    ({"outputs": {"break_even": {"x": "costs.klm.keystroke_s", "y": "costs.learn.encoding_s", "command": 999}}},
     "index 999 is outside"),
    ({"outputs": {"break_even": {"x": "costs.klm.keystroke_s", "y": "costs.learn.encoding_s", "command": "Fly"}}},
     "unknown command 'Fly'"),
])
def test_seed_overflow_and_break_even_command_are_checked_up_front(change, message) -> None:
    spec = {**copy.deepcopy(GOOD), **change}
    spec["vary"]["parameters"]["costs.learn.encoding_s"] = {"values": [1.0, 2.0]}
    with pytest.raises(SweepSpecError, match=message):
        parse_spec(spec)


def test_relative_paths_in_a_spec_resolve_against_its_folder(tmp_path: Path, monkeypatch) -> None:
    from shortcut_gym.lab.sweep.spec import base_settings, load_spec

    (tmp_path / "specs").mkdir()
    (tmp_path / "specs" / "fast.yaml").write_text("klm: {keystroke_s: 0.09}\n")
    (tmp_path / "specs" / "s.yaml").write_text("name: r\nbase: {costs: fast.yaml}\nagents: [{name: always_menu}]\n"
                                               "seeds: {count: 1}\n")
    monkeypatch.chdir(tmp_path)  # not the spec's folder
    spec = load_spec(tmp_path / "specs" / "s.yaml")
    assert base_settings(spec)["costs"]["klm"]["keystroke_s"] == 0.09
