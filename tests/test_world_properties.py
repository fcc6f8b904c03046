"""Property tests: times are positive and finite over the valid parameter space."""

from __future__ import annotations

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from shortcut_gym.envs import BatchSimulator, make_world
from shortcut_gym.envs import costs as C

pos = st.floats(min_value=1e-3, max_value=5.0, allow_nan=False)
nonneg = st.floats(min_value=0.0, max_value=5.0, allow_nan=False)

cost_dicts = st.fixed_dictionaries({
    "klm": st.fixed_dictionaries({"keystroke_s": pos, "point_s": pos, "button_s": pos, "home_s": nonneg,
                                  "mental_s": nonneg}),
    "fitts": st.fixed_dictionaries({"intercept_s": st.floats(0.0, 1.0), "slope_s_per_bit": pos}),
    "menu": st.fixed_dictionaries({"search_intercept_s": nonneg, "search_slope_s_per_item": nonneg,
                                   "decision_intercept_s": nonneg, "decision_slope_s_per_bit": nonneg,
                                   "item_height_px": st.floats(1.0, 100.0)}),
    "learn": st.fixed_dictionaries({"encoding_s": nonneg}),
    "errors": st.fixed_dictionaries({"commission_share": st.floats(0.0, 1.0), "undo_keystrokes": st.integers(1, 4)}),
})


@settings(max_examples=150, deadline=None)
@given(costs=cost_dicts, n=st.integers(1, 30), data=st.data())
def test_operator_times_positive_and_finite(costs: dict, n: int, data) -> None:
    cs = C.CostSettings.model_validate(costs)
    idx = data.draw(st.integers(0, n - 1))
    p = data.draw(st.floats(1e-6, 1.0))
    t = data.draw(st.integers(1, 10_000))
    for hand in (False, True):
        m = C.menu_time_s(cs, n, idx, p, t, hand)
        h = C.hotkey_time_s(cs, 2, hand, 0.05)
        assert math.isfinite(m) and m > 0
        assert math.isfinite(h) and h > 0


@settings(max_examples=30, deadline=None)
@given(costs=cost_dicts, seed=st.integers(0, 10_000),
       kind=st.sampled_from(["actr", "actr_exact", "pavlik_anderson", "exponential", "power"]))
def test_simulated_durations_positive_finite_and_recall_in_unit_interval(costs: dict, seed: int, kind: str) -> None:
    world = make_world(costs=costs, memory={"kind": kind}, schedule={"sessions": 2, "trials_per_session": 20})
    sim = BatchSimulator(world)
    sim.reset(seeds=[seed, seed + 1])
    rng = np.random.default_rng(seed)
    for _ in range(world.horizon):
        r = sim.step(rng.integers(0, 3, size=2))
        assert np.all(np.isfinite(r)) and np.all(r < 0)
        assert np.all((sim.p_recall >= 0) & (sim.p_recall <= 1))
        assert np.all(np.isfinite(sim.obs))
