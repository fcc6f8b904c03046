"""Named views of the compiled kernel's flat arrays, one field per column, for Python-side code.

The kernel's entry points (:func:`~shortcut_gym.envs.kernel.step_users` and friends) take flat
arrays whose columns are the index constants of :mod:`shortcut_gym.envs.kernel`, because numba
unboxes a NamedTuple argument on every call from Python, which the single env's step would feel
(``scripts/bench_env.py`` measures that step). These NamedTuples name and document every column
in the same order (a test pairs each field with its constant), so Python code builds and reads the
arrays by name. Times are in seconds; "clock" times are memory-clock times (onsets with
between-session gaps scaled).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np


class KernelParams(NamedTuple):
    """Float kernel parameters (``kernel.P_*`` then ``kernel.W_*``), from a world's settings."""

    mental_s: float  # P_M: KLM mental preparation M
    keystroke_s: float  # P_K: KLM keystroke K
    point_s: float  # P_P: KLM pointing P (fixed part; the Fitts' law time is per command)
    button_s: float  # P_B: KLM button press or release B
    home_s: float  # P_H: KLM homing H between mouse and keyboard
    encoding_s: float  # P_ENC: studying a hotkey (the learn action)
    commission_share: float  # P_COMM: share of failed recalls that type a wrong command
    undo_keystrokes: float  # P_UNDOK: keys of the undo shortcut
    decay: float  # P_DECAY: base-level decay d (ACT-R and power forms)
    threshold: float  # P_TAU: retrieval threshold tau
    noise_s: float  # P_S: retrieval noise s of the logistic recall probability
    latency_factor_s: float  # P_F: latency factor F (retrieval time F e^-A)
    spacing_scale: float  # P_PA_C: spacing-effect scale c (decay c e^m + a)
    spacing_intercept: float  # P_PA_A: spacing-effect intercept a
    exponential_rate_per_s: float  # P_EXP_RATE: decay rate of the exponential form (1/s)
    power_time_unit_s: float  # P_POW_U: time unit of the power form
    learn_weight: float  # W_LEARN: trace weight of a learn action
    hotkey_success_weight: float  # W_HK_OK: trace weight of a recalled hotkey
    hotkey_failure_weight: float  # W_HK_FAIL: trace weight of a failed hotkey attempt
    menu_weight: float  # W_MENU: trace weight of a menu selection

    def array(self) -> np.ndarray:
        """The flat float64 vector the kernel reads."""
        return np.asarray(self, dtype=np.float64)


class KernelIntParams(NamedTuple):
    """Integer kernel parameters (``kernel.I_*``)."""

    memory_kind: int  # I_KIND: memory form code (kernel.K_*, memory.MEMORY_CODES)
    recent_traces: int  # I_RECENT: traces kept exactly by the O(1) ACT-R form
    observe_recall: int  # I_OBS_RECALL: 1 when the observation carries the recall probability
    onehot_target: int  # I_ONEHOT: 1 for a one-hot target, 0 for a scaled index
    aids_on: int  # I_AIDS: 1 when any interface aid is on (0 runs the aid-free path)
    warmup_sessions: int  # I_WARMUP: warm-up block 0 off, 1 first session only, 2 every session

    def array(self) -> np.ndarray:
        """The flat int64 vector the kernel reads."""
        return np.asarray(self, dtype=np.int64)


class CommandConstants(NamedTuple):
    """Per-command constants (``kernel.C_*``); each field is one column (one value per command)."""

    search_s: np.ndarray  # C_SEARCH: novice visual search of the menu
    decision_s: np.ndarray  # C_DECISION: Hick-Hyman decision time of the expert
    pointing_s: np.ndarray  # C_POINTING: Fitts' law pointing time to the item
    hotkey_keys: np.ndarray  # C_KEYS: keystrokes of the hotkey
    label_search_s: np.ndarray  # C_LABEL_SEARCH: key labels' extra search (novice share)
    label_weight: np.ndarray  # C_LABEL_W: trace weight of reading a key label
    nudge_from: np.ndarray  # C_NUDGE_FROM: nudge shown from this menu selection count ...
    nudge_until: np.ndarray  # C_NUDGE_UNTIL: ... until (not including) this one
    nudge_s: np.ndarray  # C_NUDGE_S: reading the nudge
    nudge_weight: np.ndarray  # C_NUDGE_W: trace weight of the nudge
    delay_s: np.ndarray  # C_DELAY_S: menu delay
    lock_after: np.ndarray  # C_LOCK_AFTER: menu uses before the item locks (inf: never)
    warmup_s: np.ndarray  # C_WARMUP_S: practising the hotkey in the warm-up block
    warmup_weight: np.ndarray  # C_WARMUP_W: trace weight of the warm-up practice

    @classmethod
    def of(cls, table: np.ndarray) -> CommandConstants:
        """Named columns of a (commands, N_CMDC) table (views, not copies)."""
        return cls(*table.T)


class CommandState(NamedTuple):
    """One user's state for one command: ``command_float_state`` (``kernel.F_*``) then
    ``command_counts`` (``kernel.S_*``)."""

    old_weight: float  # F_OLD_W: summed weight of the old traces folded in (O(1) ACT-R form)
    old_first_clock_s: float  # F_OLD_FIRST: clock of the oldest folded-in trace
    old_last_clock_s: float  # F_OLD_LAST: clock of the newest folded-in trace
    exp_strength: float  # F_EXP_S: trace strength of the exponential form at exp_clock_s
    exp_clock_s: float  # F_EXP_T: clock of that strength
    last_use_onset_s: float  # F_LAST_USE: onset of the last trial with this target
    old_last_trial: float  # F_OLD_LAST_TRIAL: trial that laid the newest folded-in trace (-1: off the schedule)
    stored_traces: int  # S_NTR: traces held in the trace buffer
    menu_selections: int  # S_MENU_SEL: menu selections (search-to-decision expertise)
    exposures: int  # S_EXPOSURE: trials with this target
    hotkey_successes: int  # S_HK_OK
    hotkey_failures: int  # S_HK_FAIL
    learn_actions: int  # S_LEARN


class Trace(NamedTuple):
    """One stored trace: a row of ``traces`` (``kernel.T_*``)."""

    clock_s: float  # T_CLOCK: memory clock when it was laid
    weight: float  # T_WEIGHT
    decay: float  # T_DECAY: its own decay (spacing-effect form; the base decay otherwise)
    trial: float  # T_TRIAL: trial that laid it (-1: a warm-up block's, or laid on a caller's own clock)


class UserState(NamedTuple):
    """Per-user state (``kernel.U_*``)."""

    trial: int  # U_TRIAL: index of the upcoming trial
    hand: int  # U_HAND: kernel.HAND_MOUSE or kernel.HAND_KEYBOARD


class ScheduleArrays(NamedTuple):
    """A batch's schedules, (users, trials) each: :class:`BatchSimulator`'s ``sched_*`` arrays."""

    command: np.ndarray  # sched_command: target command index (int64)
    uniform: np.ndarray  # sched_uniform: the uniform that decides a hotkey attempt's outcome
    onset_s: np.ndarray  # sched_onset: trial onset
    clock_s: np.ndarray  # sched_clock: memory clock of the trial
    session: np.ndarray  # sched_session: session index (int64)
    gap_total_s: np.ndarray  # sched_gap: time in between-session gaps before the trial
    noise: np.ndarray  # sched_noise: factor on the trial's time and breakdown (1.0 without costs.noise)


class UserArrays(NamedTuple):
    """A batch's kernel state: :class:`BatchSimulator`'s state arrays (B users, C commands)."""

    command_float_state: np.ndarray  # (B, C, N_FS) float64, columns as CommandState's first seven
    command_counts: np.ndarray  # (B, C, N_IS) int64, columns as CommandState's last six
    traces: np.ndarray  # (B, C, capacity, N_TRACE) float64, rows as Trace
    user_state: np.ndarray  # (B, N_US) int64, columns as UserState
