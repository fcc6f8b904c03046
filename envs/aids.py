"""Interface aids: changes a designer can make to push users from menus to hotkeys (world settings).

Each aid is one section of :class:`AidSettings` (the ``aids:`` part of a world, or a preset in
``configs/aids/``). Every section is off by default, and off means the world runs exactly as it
would without aids (bit for bit). Each section names the commands it applies to: ``"none"``
(off), ``"all"``, or a list of command names of the scenario.

* ``key_labels``: the hotkey is printed beside the menu item. A menu selection of a labelled
  command lays an extra memory trace of ``trace_weight`` (it is seen, not rehearsed); every
  label in a menu lengthens the visual search of that menu by ``search_s_per_label``, a search
  cost that fades with menu expertise exactly as the search term of the menu model does
  (Cockburn, Gutwin & Greenberg 2007: T = (1 - e) T_search + e T_decision + T_pointing).
  Operator ``label_search``.
* ``nudge``: after the ``after_menu_selections``-th menu selection of a command a reminder of its
  hotkey pops up, on that selection and the ``times - 1`` following ones; reading and dismissing
  it costs ``reading_s`` and lays a trace of ``trace_weight``. Operator ``nudge``.
* ``menu_delay``: every menu selection of the command waits ``delay_s`` before the item responds
  (the menu path only: menu, learn, and the menu after a failed hotkey). Operator ``menu_delay``.
* ``menu_lockout``: once a command has been used ``after_uses`` times (any way), its menu item is
  disabled and shows the hotkey: a menu or learn choice opens the menu as before, finds the item
  greyed out and must then type the hotkey: H (if the hand is not on the keyboard) + keys x K
  (KLM, Card, Moran & Newell 1980). The hand ends on the keyboard. Operator ``lockout``.
* ``warmup``: before the first trial of the first session (or of every session) the user is
  shown each chosen command's hotkey and types it once: one H if the hand is on the mouse, then per
  command ``reading_s`` + M + keys x K (KLM), laying a trace of ``trace_weight`` per command at the
  block's start. Operator ``warmup`` (the whole block, charged to that session's first trial).

Values: no published effect size is used. Every default below is an assumption of this project
(no source); the label search cost is set at half the menu model's per-item search slope
(0.1 s per item, itself from memory of Cockburn et al. 2007), the operator times of the lockout
and warm-up paths are KLM's.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
from pydantic import Field, field_validator

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.strict import StrictModel

CommandChoice = Literal["none", "all"] | list[str]

#: Names of the aids, in the order of :class:`AidSettings`.
AID_NAMES = ("key_labels", "nudge", "menu_delay", "menu_lockout", "warmup")


class _AidSection(StrictModel):
    """One aid: which commands it applies to (``"none"`` = off, ``"all"``, or a list of names)."""

    commands: CommandChoice = Field(default="none", description=(
        "the commands the aid applies to: `none` (off), `all`, or a list of the scenario's command names"))

    @field_validator("commands")
    @classmethod
    def _names_listed_once(cls, v: CommandChoice) -> CommandChoice:
        if isinstance(v, list):
            if not v:
                raise ValueError("the command list is empty: write 'none' to switch the aid off")
            seen = set()
            for name in v:
                if name in seen:
                    raise ValueError(f"command {name!r} is listed twice")
                seen.add(name)
        return v

    @property
    def on(self) -> bool:
        """Whether the aid applies to any command."""
        return self.commands != "none"

    def mask(self, names: tuple[str, ...], where: str) -> np.ndarray:
        """Boolean mask over the scenario's commands; an unknown name raises naming ``where``."""
        if self.commands == "none":
            return np.zeros(len(names), dtype=bool)
        if self.commands == "all":
            return np.ones(len(names), dtype=bool)
        out = np.zeros(len(names), dtype=bool)
        for name in self.commands:
            if name not in names:
                raise ConfigError(f"{where}.commands: unknown command {name!r}; the scenario has {list(names)}")
            out[names.index(name)] = True
        return out


class KeyLabels(_AidSection):
    """Hotkey labels beside menu items (see the module docstring). Assumptions, no source."""

    trace_weight: float = Field(default=0.2, ge=0, description="trace laid by a labelled menu selection")
    search_s_per_label: float = Field(default=0.05, ge=0, description="novice search time per label in a menu (s)")


class Nudge(_AidSection):
    """A hotkey reminder after the n-th menu selection (see the module docstring). Assumptions, no source."""

    after_menu_selections: int = Field(default=3, ge=1, description="first menu selection that shows it")
    times: int = Field(default=1, ge=1, description="menu selections in a row that show it")
    reading_s: float = Field(default=1.5, ge=0, description="reading and dismissing the reminder (s)")
    trace_weight: float = Field(default=0.5, ge=0, description="trace the reminder lays")


class MenuDelay(_AidSection):
    """A wait added to every menu selection (see the module docstring). Assumption, no source."""

    delay_s: float = Field(default=1.0, ge=0, description="added wait per menu selection (s)")


class MenuLockout(_AidSection):
    """The menu item disabled after n uses (see the module docstring). Assumption, no source."""

    after_uses: int = Field(default=5, ge=0, description="uses of the command before its item is disabled")


class Warmup(_AidSection):
    """Practice of chosen hotkeys at session start (see the module docstring). Assumptions, no source."""

    sessions: Literal["first", "every"] = Field(default="first", description=(
        "practise before the first session only (`first`) or before every session (`every`)"))
    reading_s: float = Field(default=1.0, ge=0, description="reading the prompt, per command (s)")
    trace_weight: float = Field(default=1.0, ge=0, description="trace laid per practised command")


class AidSettings(StrictModel):
    """All interface aids of a world; one YAML preset in ``configs/aids/`` is one of these."""

    name: str = Field(default="none", description="the preset's name (shown in outputs)")
    key_labels: KeyLabels = Field(default=KeyLabels(), description="hotkey printed beside the menu item")
    nudge: Nudge = Field(default=Nudge(), description="a hotkey reminder after some menu selections")
    menu_delay: MenuDelay = Field(default=MenuDelay(), description="a wait added to every menu selection")
    menu_lockout: MenuLockout = Field(default=MenuLockout(), description="the menu item disabled after some uses")
    warmup: Warmup = Field(default=Warmup(), description="hotkey practice at the start of a session")

    @property
    def any_on(self) -> bool:
        """Whether any aid applies to any command."""
        return any(getattr(self, a).on for a in AID_NAMES)

    def active(self) -> tuple[str, ...]:
        """Names of the aids that apply to at least one command."""
        return tuple(a for a in AID_NAMES if getattr(self, a).on)
