"""A world cannot change after it is made: its plans are cached by its digest and its simulator
reads its arrays, so a changed part would silently desynchronise them."""

from __future__ import annotations

import dataclasses

import numpy as np
import pydantic
import pytest

from shortcut_gym.envs.task import CommandSet
from shortcut_gym.envs.world import make_world

ARRAYS = ("menu_of", "item_index", "menu_size", "keystrokes", "probability", "within_menu_probability")


def test_no_part_of_a_world_can_be_changed_in_place() -> None:
    world = make_world(memory="spacing")
    digest = world.digest()
    with pytest.raises(dataclasses.FrozenInstanceError):
        world.costs = world.costs  # type: ignore[misc]
    for settings, field in ((world.costs, "keyboard_share"), (world.memory, "kind"), (world.schedule, "sessions"),
                            (world.scenario, "zipf_exponent"), (world.aids, "menu_delay_s")):
        if field not in type(settings).model_fields:
            field = next(iter(type(settings).model_fields))
        with pytest.raises(pydantic.ValidationError, match="frozen"):
            setattr(settings, field, getattr(settings, field))
    for name in ARRAYS:
        array = getattr(world.commands, name)
        with pytest.raises(ValueError, match="read-only"):
            array[0] = array[0]
    assert world.digest() == digest


def test_a_command_set_copies_the_arrays_it_is_given() -> None:
    commands = make_world().commands
    given = {name: np.array(getattr(commands, name)) for name in ARRAYS}
    copy = CommandSet(commands.names, commands.hotkeys, commands.menu_titles, **given)
    for name in ARRAYS:
        given[name][0] = given[name][0]  # the caller's arrays stay writable
        np.testing.assert_array_equal(getattr(copy, name), getattr(commands, name))
        assert not getattr(copy, name).flags.writeable


def _scenario_with_gap_list(tmp_path) -> str:
    import yaml

    from shortcut_gym.envs.config import bundled_config_dir

    scenario = yaml.safe_load((bundled_config_dir() / "scenarios" / "tidepool_logbook.yaml").read_text())
    scenario["schedule"] = {"sessions": 4, "trials_per_session": 10, "gap_h": [20.0, 44.0, 70.0]}
    path = tmp_path / "listed.yaml"
    path.write_text(yaml.safe_dump(scenario))
    return str(path)


@pytest.mark.parametrize("sessions", [1, 2, 6])
def test_a_sessions_override_that_breaks_the_scenarios_gap_list_names_the_scenario_and_the_fixes(
        tmp_path, sessions) -> None:
    from shortcut_gym.envs.errors import ConfigError

    path = _scenario_with_gap_list(tmp_path)
    with pytest.raises(ConfigError) as raised:
        make_world(path, schedule={"sessions": sessions, "trials_per_session": 12})
    message = str(raised.value)
    assert path in message and "[20.0, 44.0, 70.0]" in message and f"fit {sessions} sessions" in message
    assert "'gap_h': 24.0" in message and f"a list of {sessions - 1} gaps" in message
    assert "keep sessions at 4" in message
    # each fix it names works
    assert make_world(path, schedule={"sessions": sessions, "gap_h": 24.0}).schedule.sessions == sessions
    if sessions > 1:
        gaps = [5.0] * (sessions - 1)
        assert make_world(path, schedule={"sessions": sessions, "gap_h": gaps}).schedule.gap_h == gaps
    assert make_world(path, schedule={"sessions": 4, "trials_per_session": 12}).horizon == 48


def test_a_sessions_override_that_fits_the_gap_list_is_taken(tmp_path) -> None:
    world = make_world(_scenario_with_gap_list(tmp_path), schedule={"trials_per_session": 5})
    assert world.schedule.gap_h == [20.0, 44.0, 70.0] and world.horizon == 20
