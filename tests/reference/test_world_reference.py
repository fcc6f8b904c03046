"""External reference checks of the world: published constants and formulas, PyPI checkers."""

from __future__ import annotations

import math

import gymnasium as gym
import numpy as np
import pytest
from gymnasium.utils.env_checker import check_env as gym_check_env
from stable_baselines3.common.env_checker import check_env as sb3_check_env

from shortcut_gym.envs import CommandSelectionEnv, make_world
from shortcut_gym.envs import costs as C
from shortcut_gym.envs import memory as Mem


# ---- gymnasium's and Stable-Baselines3's environment checkers ------------------------------
@pytest.mark.parametrize("observe_recall", [False, True])
@pytest.mark.parametrize("encoding", ["onehot", "index"])
def test_gymnasium_env_checker_passes(observe_recall: bool, encoding: str) -> None:
    env = CommandSelectionEnv(observe_recall=observe_recall, target_encoding=encoding,
                              schedule={"sessions": 2, "trials_per_session": 10})
    gym_check_env(env, skip_render_check=False)


def test_gymnasium_make_checker_passes_through_registered_id() -> None:
    env = gym.make("shortcut_gym/CommandSelection-v0", schedule={"sessions": 1, "trials_per_session": 20})
    gym_check_env(env.unwrapped)
    obs, _ = env.reset(seed=0)
    assert env.observation_space.contains(obs)


def test_stable_baselines3_env_checker_passes() -> None:
    env = CommandSelectionEnv(schedule={"sessions": 2, "trials_per_session": 10})
    sb3_check_env(env, warn=True, skip_render_check=True)


# ---- Keystroke-Level Model: Card, Moran & Newell (1980), CACM 23(7), Figure 1 ----------------
def test_klm_operator_constants_match_card_moran_newell_1980() -> None:
    assert C.KLM_KEYSTROKE_S == {
        "best_typist": 0.08,
        "good_typist": 0.12,
        "average_skilled_typist": 0.20,
        "average_non_secretary": 0.28,
        "random_letters": 0.50,
        "worst_typist": 1.20,
    }
    assert C.KLM_POINT_S == 1.1
    assert C.KLM_HOME_S == 0.4
    assert C.KLM_MENTAL_S == 1.35
    # B (button press or release) = 0.1 s: Card, Moran & Newell (1983), the KLM's mouse-button operator.
    assert C.KLM_BUTTON_S == 0.1
    defaults = C.KLMOperators()
    assert (defaults.k_s, defaults.point_s, defaults.home_s, defaults.mental_s) == (0.20, 1.1, 0.4, 1.35)


def test_kieras_mental_operator_is_marked_from_memory() -> None:
    # Kieras, "Using the keystroke-level model to estimate execution times" (KLM guide, 1993/2001)
    # uses M = 1.2 s: from memory, as envs/costs.py marks it; check the guide before relying on it.
    assert C.KIERAS_MENTAL_S == 1.2


# ---- Fitts' law, Shannon form: MacKenzie (1992), HCI 7(1) ------------------------------------
@pytest.mark.parametrize(
    ("distance", "width", "bits"),
    [
        (1.0, 1.0, 1.0),  # log2(1/1 + 1) = 1 bit
        (3.0, 1.0, 2.0),  # log2(3 + 1) = 2 bits
        (8.0, 1.0, math.log2(9.0)),  # 3.1699 bits: the Shannon form stays positive as D/W -> 0
        (256.0, 8.0, math.log2(33.0)),  # 5.0444 bits
        (0.0, 5.0, 0.0),  # zero distance, zero bits (the Welford/Fitts forms go negative here)
    ],
)
def test_fitts_shannon_index_of_difficulty_worked_values(distance: float, width: float, bits: float) -> None:
    assert C.fitts_index_of_difficulty(distance, width) == pytest.approx(bits, abs=1e-12)


def test_fitts_movement_time_is_linear_in_id() -> None:
    # MT = a + b ID with a = 0.1 s, b = 0.2 s/bit at ID = 2 bits: 0.5 s (worked by hand).
    assert C.fitts_time_s(3.0, 1.0, 0.1, 0.2) == pytest.approx(0.5)


def test_iso_9241_9_effective_throughput() -> None:
    # We = 4.133 SD (Soukoreff & MacKenzie 2004); D = 4.133, SD = 1 -> ID_e = log2(2) = 1 bit; MT = 0.5 s -> 2 bits/s.
    assert C.effective_throughput_bits_per_s(4.133, 1.0, 0.5) == pytest.approx(2.0)


# ---- Search-decision-pointing: Cockburn, Gutwin & Greenberg (2007), CHI ------------------------
@pytest.mark.parametrize(("t", "e"), [(1, 0.0), (2, 0.5), (4, 0.75), (10, 0.9), (100, 0.99)])
def test_menu_expertise_is_one_minus_one_over_t(t: int, e: float) -> None:
    assert C.menu_expertise(t) == pytest.approx(e)


def test_search_decision_pointing_mixes_search_and_decision_by_expertise() -> None:
    costs = C.CostSettings()
    m = costs.menu
    n, idx, p = 6, 2, 0.25
    search = m.search_intercept_s + m.search_slope_s_per_item * n
    decision = m.decision_intercept_s + m.decision_slope_s_per_bit * 2.0  # log2(1/0.25) = 2 bits (Hick-Hyman)
    h = m.item_height_px
    pointing = costs.fitts.intercept_s + costs.fitts.slope_s_per_bit * math.log2((idx + 0.5) * h / h + 1)
    for t in (1, 2, 5):
        e = 1 - 1 / t
        expected = (1 - e) * search + e * decision + pointing
        assert C.menu_item_time_s(costs, n, idx, p, t) == pytest.approx(expected)


# ---- ACT-R base-level learning against pyactr (PyPI) -----------------------------------------
def test_actr_base_level_matches_pyactr() -> None:
    from pyactr.utilities import baselevel_learning

    # Presentations at 0, 10, 20 s, now 30 s, d = 0.5: -0.32516 (Anderson & Lebiere 1998 equation).
    times = np.array([0.0, 10.0, 20.0])
    ours = Mem.actr_activation(30.0, times.tolist(), 0.5)
    theirs = baselevel_learning(30.0, times, True, 0.5)
    assert ours == pytest.approx(theirs, abs=1e-12)
    assert ours == pytest.approx(-0.32516, abs=1e-5)
    rng = np.random.default_rng(3)
    for _ in range(20):
        ts = np.sort(rng.uniform(0, 5000, size=rng.integers(1, 30)))
        now = ts[-1] + rng.uniform(1, 3000)
        for d in (0.3, 0.5, 0.7):
            assert Mem.actr_activation(now, ts.tolist(), d) == pytest.approx(baselevel_learning(now, ts, True, d))


def test_actr_retrieval_latency_matches_pyactr() -> None:
    from pyactr.utilities import retrieval_latency

    for a in (-2.0, -0.3, 0.0, 1.5):
        assert Mem.retrieval_latency_s(a, 0.1) == pytest.approx(retrieval_latency(a, 0.1, 1.0))


def test_recall_probability_equals_pyactr_logistic_noise_threshold_crossing() -> None:
    """P(A + noise >= tau) with pyactr's logistic activation noise equals 1/(1+exp(-(A-tau)/s))."""
    from pyactr.utilities import calculate_instantaneous_noise

    np.random.seed(12345)  # pyactr draws from numpy's global generator
    s, tau, n = 0.4, -3.5, 20000
    for a in (-4.0, -3.5, -3.0):
        hits = sum(a + calculate_instantaneous_noise(s) >= tau for _ in range(n))
        assert hits / n == pytest.approx(Mem.recall_probability(a, tau, s), abs=0.015)


# ---- Fact of the trade: expert hotkey about twice as fast as the menu -------------------------
def test_expert_hotkey_at_least_twice_as_fast_as_menu_with_default_costs() -> None:
    """Common practice, no source: an expert's hotkey is at least about twice as fast as the menu.

    Expert: menu expertise after 1,000 selections; hotkey recall at activation 1 (latency F e^-1);
    hands on the keyboard (a hotkey user's resting position, so the menu needs homing).
    """
    world = make_world()
    cs, costs = world.commands, world.costs
    ratios = []
    for i in range(cs.n_commands):
        menu = C.menu_time_s(costs, int(cs.menu_size[i]), int(cs.item_index[i]),
                             float(cs.within_menu_probability[i]), 1000, hand_on_keyboard=True)
        hotkey = C.hotkey_time_s(costs, int(cs.keystrokes[i]), True,
                                 Mem.retrieval_latency_s(1.0, world.memory.latency_factor_s))
        ratios.append(menu / hotkey)
    assert np.mean(ratios) >= 2.0
    assert min(ratios) >= 1.8  # "about" twice for every command
