"""The named layouts of kernel_layout match the kernel's index constants, and the simulator's named
views report what happened in the trials (counted from the trial history, not from the arrays)."""

from __future__ import annotations

import inspect

import numpy as np
import pytest

from shortcut_gym.envs import BatchSimulator, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.kernel_layout import (
    CommandConstants,
    CommandState,
    KernelIntParams,
    KernelParams,
    ScheduleArrays,
    Trace,
    UserArrays,
    UserState,
)

# every layout: (NamedTuple, the kernel's width constants, the prefixes of its column constants)
LAYOUTS = [
    (KernelParams, ["N_PAR"], ("P_", "W_")),
    (KernelIntParams, ["N_IPAR"], ("I_",)),
    (CommandConstants, ["N_CMDC"], ("C_",)),
    (CommandState, ["N_FS", "N_IS"], ("F_", "S_")),
    (Trace, ["N_TRACE"], ("T_",)),
    (UserState, ["N_US"], ("U_",)),
]


def constants_named(layout) -> list[str]:
    """The kernel constant each field's comment starts with (``field: type  # CONSTANT: ...``)."""
    comments = {ln.split(":")[0].strip(): ln.split("  # ", 1)[1] for ln in inspect.getsource(layout).splitlines()
                if "  # " in ln and ln.startswith("    ") and not ln.startswith("     ")}
    return [comments[f].split(":")[0].strip() for f in layout._fields]


@pytest.mark.parametrize(("layout", "widths", "prefixes"), LAYOUTS, ids=lambda v: getattr(v, "__name__", None))
def test_each_field_names_the_kernel_constant_of_its_column(layout, widths, prefixes) -> None:
    named = constants_named(layout)
    assert len(layout._fields) == sum(getattr(k, w) for w in widths)
    # every column constant of the kernel is named once, by the field at its position
    kernel = {n for n in vars(k) if n.startswith(prefixes) and isinstance(getattr(k, n), int)}
    assert sorted(named) == sorted(kernel)
    # a field's position is its constant's column (CommandState: the counts follow the N_FS floats)
    offset = {"S_": k.N_FS} if layout is CommandState else {}
    assert [getattr(k, n) + offset.get(n[:2], 0) for n in named] == list(range(len(named)))


def test_named_parameters_are_the_world_settings_and_the_flat_vectors() -> None:
    world = make_world(costs={"klm": {"mental_s": 1.11}, "learn": {"encoding_s": 7.5}},
                       memory={"threshold": -2.25, "weights": {"menu": 0.125}}, observe_recall=True,
                       target_encoding="index")
    par, ipar = world.kernel_parameters()
    flat, iflat = world.parameters()
    np.testing.assert_array_equal(flat, np.asarray(par))
    np.testing.assert_array_equal(iflat, np.asarray(ipar))
    assert flat[k.P_M] == par.mental_s == 1.11
    assert flat[k.P_ENC] == par.encoding_s == 7.5
    assert flat[k.P_TAU] == par.threshold == -2.25
    assert flat[k.W_MENU] == par.menu_weight == 0.125
    assert iflat[k.I_OBS_RECALL] == ipar.observe_recall == 1
    assert iflat[k.I_ONEHOT] == ipar.onehot_target == 0
    named = CommandConstants.of(world.command_constants())
    np.testing.assert_array_equal(named.hotkey_keys, world.commands.keystrokes)


@pytest.mark.parametrize("memory", ["actr", "actr_exact", "exponential"])
def test_named_views_report_the_trial_history(memory: str) -> None:
    world = make_world(schedule={"sessions": 2, "trials_per_session": 30}, memory={"kind": memory})
    w = world.memory.weights
    weight = {k.OUT_MENU: w.menu, k.OUT_LEARNED: w.learn, k.OUT_HOTKEY: w.hotkey_success,
              k.OUT_FORGOTTEN: w.hotkey_failure, k.OUT_WRONG: w.hotkey_failure}
    sim = BatchSimulator(world)
    sim.reset(seeds=[3, 4])
    rng = np.random.default_rng(0)
    history = []  # (user, trial, command, action, outcome)
    for t in range(sim.horizon):
        acts = rng.integers(0, 3, size=2)
        cmds = sim.targets().copy()
        sim.step(acts)
        history += [(b, t, int(cmds[b]), int(acts[b]), int(sim.outcome[b])) for b in range(2)]
    sched = sim.schedule_arrays
    assert isinstance(sched, ScheduleArrays) and sched.command is sim.sched_command and sched.noise is sim.sched_noise
    assert isinstance(sim.user_arrays, UserArrays) and sim.user_arrays.traces is sim.traces
    for b in range(2):
        assert sim.user_state_of(b).trial == sim.horizon
        for c in range(world.commands.n_commands):
            mine = [h for h in history if h[0] == b and h[2] == c]
            st = sim.command_state(b, c)
            assert st.exposures == len(mine)
            assert st.learn_actions == sum(h[3] == k.LEARN for h in mine)
            assert st.hotkey_successes == sum(h[4] == k.OUT_HOTKEY for h in mine)
            assert st.hotkey_failures == sum(h[4] in (k.OUT_FORGOTTEN, k.OUT_WRONG) for h in mine)
            assert st.menu_selections == sum(h[3] != k.HOTKEY or h[4] != k.OUT_HOTKEY for h in mine)
            if mine:
                assert st.last_use_onset_s == sched.onset_s[b, mine[-1][1]]
            laid = [(float(sched.clock_s[b, h[1]]), weight[h[4]]) for h in mine if weight[h[4]] > 0]
            laid_on = [h[1] for h in mine if weight[h[4]] > 0]  # the trial that laid each trace
            held = sim.stored_traces(b, c)
            if memory == "exponential":
                assert held == [] and (st.exp_strength > 0) == bool(laid)
                continue
            kept = laid if memory == "actr_exact" else laid[-world.memory.recent_traces:]
            assert [(tr.clock_s, tr.weight) for tr in held] == kept
            assert [tr.trial for tr in held] == laid_on[len(laid_on) - len(kept):]
            assert all(tr.decay == world.memory.decay for tr in held)
            folded = laid[:len(laid) - len(kept)]
            assert st.old_weight == pytest.approx(sum(wt for _, wt in folded))
            if folded:
                assert (st.old_first_clock_s, st.old_last_clock_s) == (folded[0][0], folded[-1][0])
                assert st.old_last_trial == laid_on[len(folded) - 1]
