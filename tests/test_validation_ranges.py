"""Every numeric setting has a sane range: absurd magnitudes are refused naming the field, and
every accepted combination gives finite trial times, rewards and recall (nothing silently wrong).

The ranges are project choices (no source); they are documented beside the fields in
envs/costs.py, envs/memory.py and envs/task.py.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from shortcut_gym.envs.config import load_settings
from shortcut_gym.envs.costs import CostSettings
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.memory import MemorySettings
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.task import ScenarioSettings
from shortcut_gym.envs.world import make_world

BIG, TINY = 1e300, 1e-300


@pytest.mark.parametrize(("model", "data", "field"), [
    (CostSettings, {"klm": {"keystroke_s": 200.0}}, "keystroke_s"),  # milliseconds for seconds
    (CostSettings, {"klm": {"keystroke_s": BIG}}, "keystroke_s"),
    (CostSettings, {"klm": {"point_s": 1100.0}}, "point_s"),
    (CostSettings, {"klm": {"button_s": BIG}}, "button_s"),
    (CostSettings, {"klm": {"home_s": 400.0}}, "home_s"),
    (CostSettings, {"klm": {"mental_s": 1350.0}}, "mental_s"),
    (CostSettings, {"fitts": {"intercept_s": BIG}}, "intercept_s"),
    (CostSettings, {"fitts": {"intercept_s": -BIG}}, "intercept_s"),
    (CostSettings, {"fitts": {"slope_s_per_bit": 223.0}}, "slope_s_per_bit"),
    (CostSettings, {"menu": {"search_intercept_s": BIG}}, "search_intercept_s"),
    (CostSettings, {"menu": {"search_slope_s_per_item": BIG}}, "search_slope_s_per_item"),
    (CostSettings, {"menu": {"decision_intercept_s": BIG}}, "decision_intercept_s"),
    (CostSettings, {"menu": {"decision_slope_s_per_bit": BIG}}, "decision_slope_s_per_bit"),
    (CostSettings, {"menu": {"item_height_px": TINY}}, "item_height_px"),
    (CostSettings, {"menu": {"item_height_px": BIG}}, "item_height_px"),
    (CostSettings, {"learn": {"encoding_s": BIG}}, "encoding_s"),
    (CostSettings, {"errors": {"undo_keystrokes": 10**18}}, "undo_keystrokes"),
    (MemorySettings, {"threshold": -1e6}, "threshold"),
    (MemorySettings, {"threshold": 1e6}, "threshold"),
    (MemorySettings, {"noise_s": TINY}, "noise_s"),
    (MemorySettings, {"noise_s": BIG}, "noise_s"),
    (MemorySettings, {"latency_factor_s": BIG}, "latency_factor_s"),
    (MemorySettings, {"latency_factor_s": 5.0, "threshold": -8.0}, "retrieval-failure time"),
    (MemorySettings, {"spacing_scale": BIG}, "spacing_scale"),
    (MemorySettings, {"exponential_rate_per_s": BIG}, "exponential_rate_per_s"),
    (MemorySettings, {"power_time_unit_s": TINY}, "power_time_unit_s"),
    (MemorySettings, {"power_time_unit_s": BIG}, "power_time_unit_s"),
    (MemorySettings, {"gap_time_scale": TINY}, "gap_time_scale"),
    (MemorySettings, {"weights": {"learn": BIG}}, "learn"),
    (MemorySettings, {"weights": {"menu": 1e4}}, "menu"),
])
def test_absurd_magnitudes_are_refused_naming_the_field(model, data, field) -> None:
    with pytest.raises(ConfigError, match=field):
        load_settings(model, data)


def _scenario(weight: float | None = None, zipf: float = 1.0, **schedule: Any) -> dict[str, Any]:
    items = [{"name": "Add", "hotkey": "Ctrl+A", "weight": weight}, {"name": "Tag", "hotkey": "Ctrl+T",
                                                                     "weight": weight}]
    if weight is None:
        items = [{k: v for k, v in it.items() if k != "weight"} for it in items]
    return {"name": "t", "menus": [{"title": "Log", "items": items}], "zipf_exponent": zipf,
            "schedule": schedule}


@pytest.mark.parametrize(("scenario", "field"), [
    (_scenario(trial_interval_s=BIG), "trial_interval_s"),
    (_scenario(trial_interval_s=TINY), "trial_interval_s"),
    (_scenario(gap_h=BIG), "gap_h"),
    (_scenario(gap_h=[1.0, BIG], sessions=3), "gap_h"),
    (_scenario(weight=1e308), "weight"),
    (_scenario(zipf=BIG), "zipf_exponent"),
])
def test_absurd_schedule_and_scenario_values_are_refused(scenario, field) -> None:
    with pytest.raises(ConfigError, match=field):
        load_settings(ScenarioSettings, scenario)


def _edge(lo: float, hi: float) -> st.SearchStrategy[float]:
    """The bounds themselves, their neighbourhood and the range between (log-uniform if wide)."""
    inner = st.floats(lo, hi, allow_nan=False, allow_infinity=False)
    return st.one_of(st.sampled_from([lo, hi]), inner)


SETTINGS = st.fixed_dictionaries({
    "costs": st.fixed_dictionaries({
        "klm": st.fixed_dictionaries({"keystroke_s": _edge(1e-3, 10.0), "point_s": _edge(1e-3, 10.0),
                                      "home_s": _edge(0.0, 10.0), "mental_s": _edge(0.0, 10.0)}),
        "menu": st.fixed_dictionaries({"search_slope_s_per_item": _edge(0.0, 10.0),
                                       "decision_slope_s_per_bit": _edge(0.0, 10.0)}),
        "learn": st.fixed_dictionaries({"encoding_s": _edge(0.0, 3600.0)}),
    }),
    "memory": st.fixed_dictionaries({
        "threshold": _edge(-50.0, 50.0), "noise_s": _edge(0.01, 10.0),
        "latency_factor_s": _edge(1e-6, 10.0), "decay": _edge(0.01, 0.99),
        "gap_time_scale": _edge(1e-6, 1.0),
        "weights": st.fixed_dictionaries({"learn": _edge(0.0, 100.0), "menu": _edge(0.0, 100.0)}),
    }),
    "schedule": st.fixed_dictionaries({"trial_interval_s": _edge(0.1, 7 * 86_400.0),
                                       "gap_h": _edge(1e-3, 87_600.0)}),
})


@settings(max_examples=40, deadline=None)
@given(SETTINGS, st.integers(0, 2**31))
def test_every_accepted_setting_gives_finite_times_and_probabilities(cfg, seed) -> None:
    """Within the ranges, a short learn-then-hotkey run stays finite in the env and the batch."""
    memory = dict(cfg["memory"])  # F e^-tau <= 600 s is the joint limit: keep F inside it
    memory["latency_factor_s"] = min(memory["latency_factor_s"], 600.0 * math.exp(memory["threshold"]))
    world = make_world(costs=cfg["costs"], memory=memory, observe_recall=True,
                       schedule={**cfg["schedule"], "sessions": 3, "trials_per_session": 4})
    env = CommandSelectionEnv(world=world)
    obs, _ = env.reset(seed=seed)
    actions = [2, 1, 0, 1, 1, 0, 1, 2, 1, 1, 0, 1]
    for a in actions[: world.schedule.horizon]:
        obs, reward, terminated, truncated, info = env.step(a)
        assert np.isfinite(reward) and reward < 0
        assert np.all(np.isfinite(obs))
        assert all(np.isfinite(v) and v >= 0 for v in info["time_s"].values())
        if terminated or truncated:
            break
    sim = BatchSimulator(world)
    sim.reset(seeds=np.array([seed, seed + 1]))
    for a in actions[: world.schedule.horizon]:
        rewards = sim.step(np.full(2, a, dtype=np.int64))
        assert np.all(np.isfinite(rewards)) and np.all(rewards < 0)
