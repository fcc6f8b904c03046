"""Bad configuration: every invalid field, unknown key, wrong type gets a message naming it."""

from __future__ import annotations

from pathlib import Path

import pytest

from shortcut_gym.envs import CommandSelectionEnv, ConfigError, CostSettings, kernel, make_world
from shortcut_gym.envs.config import bundled_names, load_settings


@pytest.mark.parametrize(
    ("costs", "pattern"),
    [
        ({"klm": {"point_s": -1}}, r"klm\.point_s: Input should be greater than 0 \(got -1\)"),
        ({"klm": {"typist": "octopus"}}, r"klm\.typist: Input should be .*\(got 'octopus'\)"),
        ({"klm": {"keystroke_s": "fast"}}, r"klm\.keystroke_s: .*\(got 'fast'\)"),
        ({"klm": {"mental_s": -0.1}}, r"klm\.mental_s: .*greater than or equal to 0"),
        ({"klm": {"tipyst": "best_typist"}}, r"klm\.tipyst: unknown key"),
        ({"colour": "red"}, r"colour: unknown key"),
        ({"fitts": {"slope_s_per_bit": 0}}, r"fitts\.slope_s_per_bit: Input should be greater than 0"),
        ({"fitts": {"intercept_s": -1.0}}, r"fitts: intercept_s=-1\.0 .*non-positive pointing time"),
        ({"menu": {"item_height_px": 0}}, r"menu\.item_height_px: Input should be greater than or equal to 1"),
        ({"learn": {"encoding_s": -2}}, r"learn\.encoding_s: .*greater than or equal to 0 \(got -2\)"),
        ({"errors": {"commission_share": 1.5}}, r"errors\.commission_share: .*less than or equal to 1"),
        ({"errors": {"undo_keystrokes": 0}}, r"errors\.undo_keystrokes: .*greater than or equal to 1"),
        ({"klm": "fast"}, r"klm: .*\(got 'fast'\)"),
    ],
)
def test_cost_faults_are_named(costs: dict, pattern: str) -> None:
    with pytest.raises(ConfigError, match=pattern):
        make_world(costs=costs)


@pytest.mark.parametrize(
    ("schedule", "pattern"),
    [
        ({"sessions": 0}, r"schedule: sessions: Input should be greater than or equal to 1 \(got 0\)"),
        ({"trials_per_session": "many"}, r"schedule: trials_per_session: .*\(got 'many'\)"),
        ({"trial_interval_s": -5}, r"schedule: trial_interval_s: .*greater than or equal to 0.1"),
        ({"gap_h": -1}, r"gap_h\[0\] = -1.* must be > 0 and at most 87600 hours"),
        ({"sessions": 3, "gap_h": [24]}, r"gap_h lists 1 gaps but 3 sessions need 2"),
        ({"weeks": 2}, r"schedule: weeks: unknown key"),
    ],
)
def test_schedule_faults_are_named(schedule: dict, pattern: str) -> None:
    with pytest.raises(ConfigError, match=pattern):
        make_world(schedule=schedule)


def _scenario(**over) -> dict:
    base = {
        "name": "test",
        "menus": [{"title": "A", "items": [{"name": "one", "hotkey": "Ctrl+O"}, {"name": "two", "hotkey": "Ctrl+T"}]}],
    }
    base.update(over)
    return base


@pytest.mark.parametrize(
    ("scenario", "pattern"),
    [
        (_scenario(menus=[]), r"menus: List should have at least 1 item"),
        (_scenario(menus=[{"title": "A", "items": [{"name": "x", "hotkey": "KK"}]}]),
         r"menus\.0\.items\.0\.hotkey: hotkey 'KK': the key 'KK' must be one printable"),
        (_scenario(menus=[{"title": "A", "items": [{"name": "x", "hotkey": "Hyper+K"}]}]),
         r"hotkey 'Hyper\+K': modifier 'Hyper' is not one of"),
        (_scenario(menus=[{"title": "A", "items": [{"name": "x", "hotkey": "Ctrl+"}]}]),
         r"hotkey 'Ctrl\+': the key '' must be"),
        (_scenario(menus=[{"title": "A", "items": [{"name": "x", "hotkey": "Ctrl+Ctrl+K"}]}]),
         r"hotkey 'Ctrl\+Ctrl\+K' names a modifier twice"),
        (_scenario(menus=[{"title": "A", "items": [{"name": "x", "hotkey": "Ctrl+F25"}]}]),
         r"the key 'F25' must be"),
        (_scenario(menus=[{"title": "A", "items": [{"name": "x", "hotkey": "Ctrl+ "}]}]),
         r"the key ' ' must be"),
        (_scenario(menus=[{"title": "A", "items": [{"name": "x", "hotkey": "Ctrl+K"},
                                                   {"name": "x", "hotkey": "Ctrl+J"}]}]),
         r"command name 'x' appears twice"),
        (_scenario(menus=[{"title": "A", "items": [{"name": "x", "hotkey": "Ctrl+K"},
                                                   {"name": "y", "hotkey": "Ctrl+K"}]}]),
         r"hotkey 'Ctrl\+K' is given to both 'x' and 'y'"),
        (_scenario(menus=[{"title": "A", "items": [{"name": "x", "hotkey": "Ctrl+K", "weight": 2},
                                                   {"name": "y", "hotkey": "Ctrl+J"}]}]),
         r"give a weight to every command or to none"),
        (_scenario(zipf_exponent=-1), r"zipf_exponent: .*greater than or equal to 0"),
        (_scenario(author="me"), r"author: unknown key"),
    ],
)
def test_scenario_faults_are_named(scenario: dict, pattern: str) -> None:
    with pytest.raises(ConfigError, match=pattern):
        make_world(scenario=scenario)


@pytest.mark.parametrize(
    ("hotkey", "keys"),
    [("K", 1), ("?", 1), ("/", 1), ("+", 1), ("F5", 1), ("Ctrl+K", 2), ("Alt+/", 2), ("Ctrl++", 2),
     ("Shift+F12", 2), ("Ctrl+Shift+K", 3), ("Ctrl+Alt+.", 3), ("Ctrl+Alt+Shift+Z", 4)],
)
def test_single_key_and_punctuation_hotkeys_are_valid(hotkey: str, keys: int) -> None:
    """Single keys, punctuation and chords are accepted; the chord's keystrokes reach the kernel."""
    world = make_world(scenario=_scenario(menus=[{"title": "A", "items": [
        {"name": "x", "hotkey": hotkey}, {"name": "y", "hotkey": "Ctrl+Y"}]}]))
    assert world.commands.keystrokes[0] == keys
    assert world.command_constants()[0, kernel.C_KEYS] == keys
    # in the running env a recalled hotkey of the command costs its keystrokes x K
    env = CommandSelectionEnv(world=world)
    _, info = env.reset(seed=0)
    learned, recalled = False, []
    for _ in range(world.horizon):
        mine = info["target"] == 0
        _, _, _, _, info = env.step(0 if not mine else (1 if learned else 2))
        learned = learned or mine
        if mine and info["outcome"] == "hotkey":
            recalled.append(info["time_s"]["K"])
    assert recalled and all(v == pytest.approx(keys * world.costs.klm.k_s, rel=1e-12) for v in recalled)


def test_unknown_preset_lists_bundled_ones() -> None:
    with pytest.raises(ConfigError, match=r"unknown costs preset 'turbo', and no file 'turbo' either "
                                          r"\(bundled presets: \[.*'average_skilled_mouse'"):
        make_world(costs="turbo")


def test_yaml_file_errors_name_the_file(tmp_path: Path) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text("klm: {point_s: [1, 2}\n")
    with pytest.raises(ConfigError, match=r"bad\.yaml: not valid YAML"):
        make_world(costs=bad)
    wrong = tmp_path / "wrong.yaml"
    wrong.write_text("klm:\n  home_s: lots\n")
    with pytest.raises(ConfigError, match=r"wrong\.yaml: klm\.home_s: .*\(got 'lots'\)"):
        make_world(costs=wrong)
    with pytest.raises(ConfigError, match=r"missing\.yaml: no such file"):
        make_world(costs=tmp_path / "missing.yaml")
    listy = tmp_path / "list.yaml"
    listy.write_text("- 1\n- 2\n")
    with pytest.raises(ConfigError, match=r"list\.yaml: expected a mapping of costs fields, got list"):
        make_world(costs=listy)


def test_env_option_errors() -> None:
    with pytest.raises(ConfigError, match=r"target_encoding must be 'onehot' or 'index', got 'binary'"):
        make_world(target_encoding="binary")
    with pytest.raises(ConfigError, match=r"observe_recall must be true or false, got 'yes'"):
        make_world(observe_recall="yes")  # type: ignore[arg-type]


def test_bundled_presets_load_and_differ_where_they_should() -> None:
    names = bundled_names(CostSettings)
    assert {"average_skilled_mouse", "slow_typist_mouse", "fast_typist_mouse"} <= set(names)
    ks = {n: load_settings(CostSettings, n).klm.k_s for n in names}
    assert ks["fast_typist_mouse"] == 0.08 and ks["average_skilled_mouse"] == 0.20 and ks["slow_typist_mouse"] == 1.20
    world = make_world()
    assert world.scenario.name == "tidepool_logbook" and world.commands.n_commands == 12
    assert world.commands.probability.sum() == pytest.approx(1.0)
    assert all(p > q for p, q in zip(world.commands.probability, world.commands.probability[1:]))  # Zipf by rank


def test_config_faults_read_as_sentences_with_short_values() -> None:
    import yaml

    from shortcut_gym.envs.config import MAX_SHOWN_VALUE, bundled_config_dir, validate
    from shortcut_gym.envs.costs import CostSettings
    from shortcut_gym.envs.errors import ConfigError

    # a fault of the whole mapping has no field, and pydantic's prefixes are not shown
    with pytest.raises(ConfigError) as raised:
        make_world(schedule={"sessions": 3, "gap_h": [1.0]})
    text = str(raised.value)
    assert "<top level>" not in text and "Value error" not in text and "gap_h lists 1 gaps" in text
    # a scenario file given as costs: every fault is one short line, the long menus value cut
    scenario = yaml.safe_load((bundled_config_dir() / "scenarios" / "tidepool_logbook.yaml").read_text())
    with pytest.raises(ConfigError) as raised:
        validate(CostSettings, scenario, "scen.yaml")
    lines = str(raised.value).splitlines()
    assert any(line.startswith("scen.yaml: menus: unknown key") for line in lines), lines
    assert all(len(line) < MAX_SHOWN_VALUE + 120 for line in lines), lines
    assert any("... (list of" in line for line in lines), lines
