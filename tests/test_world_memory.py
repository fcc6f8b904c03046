"""Memory models: the O(1) hybrid's error bound, the kernel against the readable references."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

from shortcut_gym.envs import BatchSimulator, Schedule, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs import memory as Mem

trace_times = st.lists(st.floats(min_value=0.0, max_value=1e6, allow_nan=False), min_size=1, max_size=60)


@settings(max_examples=200, deadline=None)
@given(times=trace_times, lag=st.floats(min_value=1.0, max_value=1e6), recent=st.integers(1, 6),
       decay=st.floats(min_value=0.1, max_value=0.9))
# Old traces 8 ms apart seen 8 days later: the difference a_o^{1-d} - a_n^{1-d} cancels badly if
# computed directly (an error four times the bound before the expm1/log1p form).
@example(times=[0.0, 1.0, 1.0, 1.5, 0.0078125], lag=723591.0, recent=3, decay=0.5)
def test_hybrid_error_within_its_bound(times: list[float], lag: float, recent: int, decay: float) -> None:
    ts = sorted(times)
    hyb = Mem.HybridBaseLevel(decay, recent)
    for t in ts:
        hyb.add(t)
    now = ts[-1] + lag
    exact = Mem.actr_activation(now, ts, decay)
    approx = hyb.activation(now)
    assert abs(exact - approx) <= hyb.error_bound(now) + 1e-9
    if len(ts) <= recent:
        assert approx == pytest.approx(exact, abs=1e-12)


@settings(max_examples=200, deadline=None)
@given(times=trace_times, weights=st.lists(st.sampled_from([0.5, 1.0, 2.0, 3.7]), min_size=60, max_size=60),
       lags=st.lists(st.floats(min_value=1e-3, max_value=1e7), min_size=1, max_size=9), recent=st.integers(1, 6),
       decay=st.floats(min_value=0.1, max_value=0.9))
# old traces 8 ms apart (the expm1/log1p branch at tiny r) and old traces at one instant (r = 0)
@example(times=[0.0, 1.0, 1.0, 1.5, 0.0078125], weights=[1.0] * 60, lags=[723591.0, 3.0], recent=3, decay=0.5)
@example(times=[5.0] * 6 + [9.0], weights=[2.0] * 60, lags=[0.5, 1e6], recent=1, decay=0.5)
def test_hybrid_activations_equal_activation_elementwise(times: list[float], weights: list[float],
                                                         lags: list[float], recent: int, decay: float) -> None:
    ts = sorted(times)
    hyb = Mem.HybridBaseLevel(decay, recent)
    nows = np.array([ts[-1] + lag for lag in lags])
    assert np.all(hyb.activations(nows) == -np.inf)  # no trace yet, as activation
    for t, w in zip(ts, weights):
        hyb.add(t, w)
    ref = np.array([hyb.activation(float(now)) for now in nows])
    fast = hyb.activations(nows)
    np.testing.assert_allclose(fast, ref, rtol=0, atol=1e-12 * max(1.0, float(np.abs(ref).max())))
    assert fast.shape == nows.shape
    grid = hyb.activations(nows.reshape(1, -1).repeat(2, axis=0))  # any shape, elementwise
    assert grid.shape == (2, len(nows)) and np.array_equal(grid[1], fast)


def test_hybrid_is_close_for_evenly_spaced_practice() -> None:
    """Petrov (2006)'s approximation assumes evenly spread old traces: then the error is tiny."""
    ts = [60.0 * i for i in range(200)]
    hyb = Mem.HybridBaseLevel(0.5, 3)
    for t in ts:
        hyb.add(t)
    for lag in (30.0, 3600.0, 86400.0):
        now = ts[-1] + lag
        assert abs(Mem.actr_activation(now, ts) - hyb.activation(now)) < 0.01


def test_hybrid_keeps_constant_state_size() -> None:
    hyb = Mem.HybridBaseLevel(0.5, 3)
    for i in range(10_000):
        hyb.add(float(i))
    assert len(hyb.times) == 3 and hyb.old_weight == pytest.approx(9997.0)


def test_pavlik_anderson_worked_example() -> None:
    """Two traces at 0 s and 10 s, now 20 s (Pavlik & Anderson 2005's decay rule, by hand).

    d1 = a (no prior activation); m(10) = ln(10^-a); d2 = c e^m + a = c 10^-a + a;
    A(20) = ln(20^-d1 + 10^-d2).
    """
    c, a = 0.217, 0.177
    d1 = a
    d2 = c * 10.0 ** (-a) + a
    expected = math.log(20.0 ** (-d1) + 10.0 ** (-d2))
    assert Mem.pavlik_anderson_activation(20.0, [0.0, 10.0], c, a) == pytest.approx(expected)


@given(lag1=st.floats(1.0, 1e5), extra=st.floats(1.0, 1e5),
       kind=st.sampled_from(["actr_exact", "pavlik_anderson", "exponential", "power"]))
@settings(max_examples=100, deadline=None)
def test_recall_probability_in_unit_interval_and_falls_with_time(lag1: float, extra: float, kind: str) -> None:
    m = Mem.MemorySettings()
    ts = [0.0, 100.0, 250.0]
    funcs = {
        "actr_exact": lambda now: Mem.actr_activation(now, ts, m.decay),
        "pavlik_anderson": lambda now: Mem.pavlik_anderson_activation(now, ts, m.spacing_scale, m.spacing_intercept),
        "exponential": lambda now: Mem.exponential_activation(now, ts, m.exponential_rate_per_s),
        "power": lambda now: Mem.power_activation(now, ts, m.decay, m.power_time_unit_s),
    }
    p1 = Mem.recall_probability(funcs[kind](250.0 + lag1), m.threshold, m.noise_s)
    p2 = Mem.recall_probability(funcs[kind](250.0 + lag1 + extra), m.threshold, m.noise_s)
    assert 0.0 <= p2 <= p1 <= 1.0
    assert Mem.recall_probability(-math.inf, m.threshold, m.noise_s) == 0.0


def _replay_reference(kind: str, actions: list[int]) -> tuple[list[float], list[float]]:
    """Run one command's trials through the simulator and the reference formulas side by side."""
    memory = {"kind": kind, "weights": {"learn": 2.0, "hotkey_success": 1.0, "hotkey_failure": 0.5, "menu": 0.3}}
    world = make_world(memory=memory, schedule={"sessions": 3, "trials_per_session": len(actions) // 3,
                                                "trial_interval_s": 45.0, "gap_h": 20.0})
    n = world.horizon
    onset = np.asarray([world.schedule.trial_interval_s * (i % (n // 3)) + (i // (n // 3)) *
                        (n // 3 * 45.0 + 72000.0) for i in range(n)])
    gap_total = np.asarray([(i // (n // 3)) * 72000.0 for i in range(n)])
    sched = Schedule(np.zeros(n, dtype=np.int64), onset, np.arange(n) // (n // 3), gap_total)
    sim = BatchSimulator(world)
    sim.reset(seeds=[7], schedules=[sched])
    m = world.memory
    w_of = {k.OUT_MENU: m.weights.menu, k.OUT_HOTKEY: m.weights.hotkey_success,
            k.OUT_FORGOTTEN: m.weights.hotkey_failure, k.OUT_WRONG: m.weights.hotkey_failure,
            k.OUT_LEARNED: m.weights.learn}
    times: list[float] = []
    weights: list[float] = []
    ours, ref = [], []
    clock = sched.memory_clock_s(m.gap_time_scale)
    for i, a in enumerate(actions):
        sim.step(np.array([a]))
        ours.append(float(sim.p_recall[0]))
        now = clock[i]
        live = [(t, w) for t, w in zip(times, weights) if w > 0]
        ts, ws = [t for t, _ in live], [w for _, w in live]
        if kind == "actr_exact":
            act = Mem.actr_activation(now, ts, m.decay, ws)
        elif kind == "actr":
            hyb = Mem.HybridBaseLevel(m.decay, m.recent_traces)
            for t, w in live:
                hyb.add(t, w)
            act = hyb.activation(now)
        elif kind == "pavlik_anderson":
            act = Mem.pavlik_anderson_activation(now, ts, m.spacing_scale, m.spacing_intercept, ws)
        elif kind == "exponential":
            act = Mem.exponential_activation(now, ts, m.exponential_rate_per_s, ws)
        else:
            act = Mem.power_activation(now, ts, m.decay, m.power_time_unit_s, ws)
        ref.append(Mem.recall_probability(act, m.threshold, m.noise_s))
        times.append(now)
        weights.append(w_of[int(sim.outcome[0])])
    return ours, ref


@pytest.mark.parametrize("kind", ["actr", "actr_exact", "pavlik_anderson", "exponential", "power"])
def test_kernel_recall_probability_equals_reference_formulas(kind: str) -> None:
    rng = np.random.default_rng(11)
    actions = rng.choice(3, size=30, p=[0.3, 0.5, 0.2]).tolist()
    ours, ref = _replay_reference(kind, actions)
    assert np.allclose(ours, ref, rtol=1e-9, atol=1e-12)
    assert max(ours) > 0.05  # the sequence does build memory, so the comparison is not vacuous


def test_memory_settings_errors_name_the_field() -> None:
    from shortcut_gym.envs import ConfigError

    with pytest.raises(ConfigError, match=r"decay: .*less than 1.*got 1\.5"):
        make_world(memory={"decay": 1.5})
    with pytest.raises(ConfigError, match=r"kind: .*got 'hopfield'"):
        make_world(memory={"kind": "hopfield"})
    with pytest.raises(ConfigError, match=r"weights\.learn: .*greater than or equal to 0.*got -1"):
        make_world(memory={"weights": {"learn": -1}})
