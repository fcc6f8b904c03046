"""Expected seconds of each path (menu, learn, recalled or failed hotkey) of one command.

Formulas of :mod:`shortcut_gym.envs.costs` as the kernel applies them: Keystroke-Level Model
operators (Card, Moran & Newell 1980), Fitts' law pointing (MacKenzie 1992), the menu model of
Cockburn, Gutwin & Greenberg (2007) at full expertise (e = 1, Hick-Hyman decision time), with the
interface aids' menu delay (:mod:`shortcut_gym.envs.aids`; the other aids are costed at decision time).
The hand position is a mean field: ``keyboard_share`` before the trial, ``next_hotkey_share``
of next trials that start with a hotkey attempt (see the package docstring, approximation 2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World


@dataclass(frozen=True)
class ActionTimes:
    """Expected seconds of each path for one command.

    ``menu_s``, ``learn_s``, ``hotkey_fixed_s`` and ``failure_s`` are the trial's own time, with the
    hand on the keyboard before the trial with probability ``keyboard_share``. ``return_after_mouse_s``
    and ``return_after_keyboard_s`` are the homing time the *next* trial pays because this one left
    the hand on the mouse (menu, learn, failed hotkey) or on the keyboard (recalled hotkey).
    """

    menu_s: float
    learn_s: float
    hotkey_fixed_s: float  # M + expected H + keys x K of a recalled hotkey, without the latency
    latency_factor_s: float
    failure_s: float  # a failed attempt including the menu that follows (omission/commission mix)
    return_after_mouse_s: float = 0.0
    return_after_keyboard_s: float = 0.0
    menu_keyboard_share: float = 0.0  # the hand-on-keyboard share before a menu or learn trial in menu_s, learn_s
    hotkey_keyboard_share: float = 0.0  # the same before a hotkey attempt, in hotkey_fixed_s and failure_s


def action_times(world: World, command: int, keyboard_share: float = 0.5,
                 next_hotkey_share: float | None = None, own_share: float = 0.0) -> ActionTimes:
    """Per-path expected times (s) of ``command`` from the world's cost settings.

    ``keyboard_share``: probability that the hand is on the keyboard before the trial;
    ``next_hotkey_share``: probability that the next trial (any command) starts with a hotkey
    attempt (default: ``keyboard_share``), which prices the hand's return. ``own_share``: the
    probability that the trial next to this one is the same command (its usage probability), taken
    to repeat this trial's device: before and after a hotkey the hand is then on the keyboard with
    own + (1 - own) x share, before and after a menu with (1 - own) x share (0: the plain mean field).
    """
    q = keyboard_share if next_hotkey_share is None else next_hotkey_share
    for label, v in (("keyboard_share", keyboard_share), ("next_hotkey_share", q), ("own_share", own_share)):
        if not 0.0 <= v <= 1.0:
            raise ConfigError(f"{label} must be in [0, 1], got {v}")
    ks_menu, q_menu = (1.0 - own_share) * keyboard_share, (1.0 - own_share) * q
    ks_hot, q_hot = own_share + ks_menu, own_share + q_menu
    c = world.costs
    klm = c.klm
    cmdc = world.command_constants()[command]
    item = cmdc[k.C_DECISION] + cmdc[k.C_POINTING]
    keys = cmdc[k.C_KEYS] * klm.k_s
    menu_core = klm.point_s + 4 * klm.button_s + item + cmdc[k.C_DELAY_S]  # an aid's delay (0 without)
    menu = klm.mental_s + ks_menu * klm.home_s + menu_core
    hotkey_fixed = klm.mental_s + (1.0 - ks_hot) * klm.home_s + keys
    fail_latency = world.memory.latency_factor_s * math.exp(-world.memory.threshold)
    commission = c.errors.commission_share * (keys + klm.mental_s + c.errors.undo_keystrokes * klm.k_s)
    failure = hotkey_fixed - keys + fail_latency + commission + klm.home_s + menu_core
    return ActionTimes(menu, menu + c.learn.encoding_s, hotkey_fixed, world.memory.latency_factor_s, failure,
                       q_menu * klm.home_s, (1.0 - q_hot) * klm.home_s, ks_menu, ks_hot)


def action_rewards(times: ActionTimes, act: np.ndarray, p_rec: np.ndarray) -> np.ndarray:
    """R (S x actions): minus the marginal expected seconds of each action in each state of
    grid activation ``act`` and recall probability ``p_rec``."""
    with np.errstate(over="ignore"):
        lat = np.where(np.isfinite(act), times.latency_factor_s * np.exp(-act), 0.0)
    ok = times.hotkey_fixed_s + lat
    R = np.zeros((len(act), 3))
    R[:, k.MENU] = -(times.menu_s + times.return_after_mouse_s)
    R[:, k.LEARN] = -(times.learn_s + times.return_after_mouse_s)
    R[:, k.HOTKEY] = -(p_rec * (ok + times.return_after_keyboard_s)
                       + (1 - p_rec) * (times.failure_s + times.return_after_mouse_s))
    return R
