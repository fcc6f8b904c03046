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
