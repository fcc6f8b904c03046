"""What the compiled plan lookup reads (:mod:`.compiled_lookup`): the table layout, its column
codes, and the equal-point index of the next-use points."""

from typing import NamedTuple

import numpy as np

from shortcut_gym.agents.planner.interpolation import GridConstants

#: memory codes of the compiled lookup
MEM_HYBRID, MEM_EXACT_ACTR, MEM_EXPONENTIAL, MEM_POWER = range(4)
_KIND_CODES = {"actr": MEM_HYBRID, "actr_exact": MEM_EXACT_ACTR, "exponential": MEM_EXPONENTIAL, "power": MEM_POWER}
#: columns of LookupTables.times (ActionTimes fields)
(T_MENU, T_MENU_KB, T_HOT_KB, T_HOT_FIXED, T_RET_KB, T_FAIL, T_RET_MOUSE, T_LEARN) = range(8)
_TIME_FIELDS = ("menu_s", "menu_keyboard_share", "hotkey_keyboard_share", "hotkey_fixed_s", "return_after_keyboard_s",
                "failure_s", "return_after_mouse_s", "learn_s")
#: columns of LookupTables.floats
F_THRESHOLD, F_NOISE, F_LATENCY, F_HOME, F_KEY, F_DECAY, F_EXP_RATE, F_POW_UNIT, F_WARMUP_BLOCK = range(9)
#: entries of LookupTables.ints
I_KIND, I_RECENT, I_AIDS, I_WARMUP, I_CAP = range(5)
#: Longest horizon (trials) whose age table (horizon x horizon doubles, 8 MB at this size) is made;
#: beyond it every decay factor is computed where it is read (the same values, slower).
AGE_TABLE_MAX_TRIALS = 1024


class LookupTables(NamedTuple):
    """What the compiled lookup reads, as flat arrays (one per plan and world)."""

    ints: np.ndarray  # (5,) memory code, hybrid recent traces, aids on, warm-up mode, trace capacity
    floats: np.ndarray  # (9,) see the F_ columns
    allowed: np.ndarray  # (commands,) int64: 1 where the choice follows the plan, else the menu
    clock: np.ndarray  # (horizon,) memory clock of each trial (s)
    session: np.ndarray  # (horizon,) session of each trial
    value_row: np.ndarray  # (commands, horizon) row of ``values`` read, -1: no future term
    values: np.ndarray  # (commands, rows, states) the plan's V
    next_clock: np.ndarray  # (commands, horizon - 1, G) next-use clocks (s)
    fresh: np.ndarray  # same shape: share of a trace laid now kept there
    times: np.ndarray  # (commands, 8) the plan's ActionTimes (the T_ columns)
    cmdc: np.ndarray  # (commands, C) the world's command constants
    new_weights: np.ndarray  # (4,) trace weights of menu, learn, hotkey success, hotkey failure
    warmup_cmds: np.ndarray  # (m,) commands the warm-up block practises
    grid: GridConstants
    ages: np.ndarray  # (horizon, horizon): decay factor at trial i's clock of a trace laid at trial j's; or (0, 0)
    next_trial: np.ndarray  # (commands, horizon - 1, G) int64: a trial whose clock is next_clock; or (0, 0, 0)
    same_point: np.ndarray  # (commands, horizon - 1, G) int64: an earlier point g' with the same clock and share, or -1


def same_points(next_clock: np.ndarray, fresh: np.ndarray) -> np.ndarray:
    """For each next-use point (c, t, g): the first earlier point g' of (c, t) with the same clock
    and the same fresh share (the same doubles, so the same values there), else -1."""
    out = np.full(next_clock.shape, -1, dtype=np.int64)
    for g in range(1, next_clock.shape[-1]):
        for h in range(g - 1, -1, -1):  # the earliest match wins: walk down, keep overwriting
            hit = (next_clock[..., h] == next_clock[..., g]) & (fresh[..., h] == fresh[..., g])
            out[..., g] = np.where(hit, h, out[..., g])
    return out
