"""Operator-level time models for issuing a command (all times in seconds).

Sources for every default:

* Keystroke-Level Model (KLM) operators: Card, Moran & Newell (1980), "The keystroke-level
  model for user performance time with interactive systems", CACM 23(7), Figure 1; and
  Card, Moran & Newell (1983), *The Psychology of Human-Computer Interaction*.
* Fitts' law, Shannon form MT = a + b log2(D/W + 1): MacKenzie (1992), "Fitts' law as a
  research and design tool in human-computer interaction", HCI 7(1).
* Menu selection, search-decision-pointing model: Cockburn, Gutwin & Greenberg (2007),
  "A predictive model of menu performance", CHI 2007.
* Hick-Hyman law: Hick (1952); Hyman (1953).
"""

from __future__ import annotations

import math
from typing import Literal

from pydantic import Field, model_validator

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.strict import StrictModel

#: KLM keystroke time K (s) by typist class, Card, Moran & Newell (1980), Figure 1.
KLM_KEYSTROKE_S: dict[str, float] = {
    "best_typist": 0.08,  # 135 wpm
    "good_typist": 0.12,  # 90 wpm
    "average_skilled_typist": 0.20,  # 55 wpm
    "average_non_secretary": 0.28,  # 40 wpm
    "random_letters": 0.50,  # typing random letters
    "worst_typist": 1.20,  # typist unfamiliar with the keyboard
}
#: KLM P, point with a mouse to a target on a display (s), Card, Moran & Newell (1980).
KLM_POINT_S = 1.1
#: KLM B, press or release a mouse button (s), Card, Moran & Newell (1983).
KLM_BUTTON_S = 0.1
#: KLM H, home the hands between keyboard and mouse (s), Card, Moran & Newell (1980).
KLM_HOME_S = 0.4
#: KLM M, mental preparation (s), Card, Moran & Newell (1980).
KLM_MENTAL_S = 1.35
#: M in Kieras' later KLM guide (s). From memory: Kieras, "Using the keystroke-level model
#: to estimate execution times" (1993/2001 guide); check the guide before relying on it.
KIERAS_MENTAL_S = 1.2

TypistClass = Literal[
    "best_typist",
    "good_typist",
    "average_skilled_typist",
    "average_non_secretary",
    "random_letters",
    "worst_typist",
]


#: Sane-range ceilings (a project choice, no source): a single KLM operator, Fitts or menu
#: coefficient above 10 s, or an encoding time above an hour, is taken for a unit mistake
#: (milliseconds for seconds) and refused with the field named.
MAX_OPERATOR_S = 10.0
MAX_ENCODING_S = 3600.0


class _Strict(StrictModel):
    """Settings base: no unknown keys, finite numbers, no boolean as a number."""


class KLMOperators(_Strict):
    """KLM operator times (s). Defaults: Card, Moran & Newell (1980), average skilled typist."""

    typist: TypistClass = Field(default="average_skilled_typist",
                                description="KLM typist class that sets K (0.08 best ... 1.20 worst s per keystroke)")
    keystroke_s: float | None = Field(default=None, gt=0, le=MAX_OPERATOR_S, description=(
        "K: one keystroke; overrides the typist class when given (Card, Moran & Newell 1980)"))
    point_s: float = Field(default=KLM_POINT_S, gt=0, le=MAX_OPERATOR_S, description=(
        "P: point with the mouse to a target on the display; 1.1 s, Card, Moran & Newell (1980)"))
    button_s: float = Field(default=KLM_BUTTON_S, gt=0, le=MAX_OPERATOR_S, description=(
        "B: press or release a mouse button (a click is 2 B); 0.1 s, Card, Moran & Newell (1983)"))
    home_s: float = Field(default=KLM_HOME_S, ge=0, le=MAX_OPERATOR_S, description=(
        "H: move the hand between keyboard and mouse; 0.4 s, Card, Moran & Newell (1980)"))
    mental_s: float = Field(default=KLM_MENTAL_S, ge=0, le=MAX_OPERATOR_S, description=(
        "M: mental preparation before a menu selection or a hotkey; 1.35 s, Card, Moran & Newell (1980) "
        "(Kieras' later guide uses 1.2 s, from memory: preset `kieras_mental`)"))

    @property
    def k_s(self) -> float:
        """Keystroke time K (s): the explicit value, else the typist class's."""
        if self.keystroke_s is not None:
            return self.keystroke_s
        return KLM_KEYSTROKE_S[self.typist]


class FittsLaw(_Strict):
    """Fitts' law, Shannon form MT = a + b log2(D/W + 1) (MacKenzie 1992).

    Defaults: mouse pointing, MacKenzie, Sellen & Buxton (1991), "A comparison of input devices
    in elemental pointing and dragging tasks", CHI '91: MT = -107 + 223 ID ms. From memory:
    check the paper's table before relying on the exact figures.
    """

    intercept_s: float = Field(default=-0.107, ge=-MAX_OPERATOR_S, le=MAX_OPERATOR_S, description=(
        "a: intercept of MT = a + b log2(D/W + 1); -0.107 s, mouse pointing of MacKenzie, Sellen & Buxton (1991), "
        "from memory; a + b log2(1.5) (the first menu item) must stay > 0"))
    slope_s_per_bit: float = Field(default=0.223, gt=0, le=MAX_OPERATOR_S, description=(
        "b: seconds per bit of the index of difficulty log2(D/W + 1); 0.223 s/bit, MacKenzie, Sellen & Buxton "
        "(1991), from memory"))


class MenuModel(_Strict):
    """Search-decision-pointing menu model (Cockburn, Gutwin & Greenberg 2007).

    T_item = (1 - e) T_search + e T_decision + T_pointing, with expertise e = 1 - 1/t for the
    t-th selection of the item; T_search = a_s + b_s n (n items in the menu);
    T_decision = a_d + b_d log2(1/p) (Hick-Hyman over the item's probability within its menu).
    Search and decision coefficients: from memory of the orders of magnitude used by Cockburn
    et al. (2007); check the paper before relying on the exact figures.
    """

    search_intercept_s: float = Field(default=0.0, ge=0, le=MAX_OPERATOR_S, description=(
        "a_s: fixed part of the novice visual search T_search = a_s + b_s n (Cockburn, Gutwin & Greenberg 2007); "
        "0 s, from memory of the paper's orders of magnitude"))
    search_slope_s_per_item: float = Field(default=0.1, ge=0, le=MAX_OPERATOR_S, description=(
        "b_s: novice search time per item of the menu (n items); 0.1 s/item, from memory of Cockburn, Gutwin & "
        "Greenberg (2007)"))
    decision_intercept_s: float = Field(default=0.08, ge=0, le=MAX_OPERATOR_S, description=(
        "a_d: intercept of the expert decision time T_decision = a_d + b_d log2(1/p) (Hick-Hyman law, Hick 1952, "
        "Hyman 1953, as used by Cockburn, Gutwin & Greenberg 2007); 0.08 s, from memory"))
    decision_slope_s_per_bit: float = Field(default=0.15, ge=0, le=MAX_OPERATOR_S, description=(
        "b_d: seconds per bit of log2(1/p), p the item's share of its menu's uses; 0.15 s/bit, from memory of "
        "Cockburn, Gutwin & Greenberg (2007)"))
    item_height_px: float = Field(default=24.0, ge=1, le=10_000, description=(
        "h: height of a menu item; pointing to item i (from 0) runs D = (i + 0.5) h to a target W = h, so h "
        "cancels in D/W and does not change any time; 24 px is common practice for desktop menus, no source"))


class LearnModel(_Strict):
    """Deliberate learning: the menu path plus an encoding time spent rehearsing the label.

    The encoding time is an assumption of this project (no source).
    """

    encoding_s: float = Field(default=1.5, ge=0, le=MAX_ENCODING_S, description=(
        "time a learn trial spends rehearsing the hotkey label on top of the menu path; 1.5 s is an assumption "
        "of this project (no source)"))


class ErrorModel(_Strict):
    """Failure paths of a hotkey attempt.

    ``commission_share``: share of failed recalls that produce a wrong command (the rest are
    omissions). ``undo_keystrokes``: keys of the undo shortcut. Both are assumptions of this
    project (no source). An undo costs M + undo_keystrokes x K.
    """

    commission_share: float = Field(default=0.25, ge=0, le=1, description=(
        "share (0..1) of failed hotkey recalls that type a wrong command (its keystrokes), then undo it (M + "
        "undo_keystrokes x K) before the menu; the rest go straight to the menu; an assumption (no source)"))
    undo_keystrokes: int = Field(default=2, ge=1, le=20, description=(
        "keystrokes of the undo shortcut (2 for Ctrl+Z), each costing K; an assumption (no source)"))


class TrialTimeNoise(_Strict):
    """Optional trial-to-trial variability of a trial's time: the model's time times a lognormal
    factor of mean 1 and coefficient of variation ``cv`` (log-scale sigma = sqrt(ln(1 + cv^2))).

    ``cv`` = 0 (default) is off: every trial takes exactly the model's time. A lognormal with a
    constant CV is common practice for response times, no source for a value; the factors come
    from their own random stream (see :mod:`shortcut_gym.envs.simulator`), so switching the noise
    on changes no other draw.
    """

    cv: float = Field(default=0.0, ge=0, le=5, description=(
        "coefficient of variation (sd / mean, dimensionless) of the lognormal factor on each trial's time; "
        "0 = off; lognormal times are common practice, no source for a value"))


class CostSettings(_Strict):
    """All time-model settings; one YAML preset in ``configs/costs/`` is one of these."""

    name: str = Field(default="custom", description="the preset's name (shown in outputs)")
    klm: KLMOperators = Field(default=KLMOperators(), description="Keystroke-Level Model operator times")
    fitts: FittsLaw = Field(default=FittsLaw(), description="Fitts' law coefficients of mouse pointing")
    menu: MenuModel = Field(default=MenuModel(), description="search-decision-pointing time of a menu item")
    learn: LearnModel = Field(default=LearnModel(), description="the extra time of a deliberate learn trial")
    errors: ErrorModel = Field(default=ErrorModel(), description="what a failed hotkey recall costs")
    noise: TrialTimeNoise = Field(default=TrialTimeNoise(), description="optional trial-to-trial time noise")

    @model_validator(mode="after")
    def _pointing_positive(self) -> CostSettings:
        # Smallest index of difficulty in a menu: first item, D/W = 0.5 -> log2(1.5).
        shortest = fitts_time_s(0.5, 1.0, self.fitts.intercept_s, self.fitts.slope_s_per_bit)
        if shortest <= 0:
            raise ValueError(
                f"fitts: intercept_s={self.fitts.intercept_s} with slope_s_per_bit="
                f"{self.fitts.slope_s_per_bit} gives a non-positive pointing time "
                f"({shortest:.4f} s) for the first menu item"
            )
        return self


def fitts_index_of_difficulty(distance: float, width: float) -> float:
    """Shannon index of difficulty ID = log2(D/W + 1) in bits (MacKenzie 1992)."""
    if distance < 0 or width <= 0:
        raise ConfigError(f"Fitts' law needs distance >= 0 and width > 0, got D={distance}, W={width}")
    return math.log2(distance / width + 1.0)


def fitts_time_s(distance: float, width: float, intercept_s: float, slope_s_per_bit: float) -> float:
    """Movement time MT = a + b ID (s), Shannon form (MacKenzie 1992)."""
    return intercept_s + slope_s_per_bit * fitts_index_of_difficulty(distance, width)


def effective_throughput_bits_per_s(distance: float, endpoint_sd: float, movement_time_s: float) -> float:
    """ISO 9241-9 effective throughput TP = log2(D/We + 1) / MT with We = 4.133 SD (bits/s).

    Soukoreff & MacKenzie (2004), "Towards a standard for pointing device evaluation", IJHCS 61.
    """
    if movement_time_s <= 0:
        raise ConfigError(f"movement time must be > 0 s, got {movement_time_s}")
    effective_width = 4.133 * endpoint_sd
    return fitts_index_of_difficulty(distance, effective_width) / movement_time_s


def hick_hyman_time_s(probability: float, intercept_s: float, slope_s_per_bit: float) -> float:
    """Decision time a + b log2(1/p) (s) for choosing an item of probability p (Hick-Hyman)."""
    if not 0 < probability <= 1:
        raise ConfigError(f"item probability must be in (0, 1], got {probability}")
    return intercept_s + slope_s_per_bit * math.log2(1.0 / probability)


def menu_expertise(selections: int) -> float:
    """Expertise e = 1 - 1/t for the t-th selection of an item (Cockburn et al. 2007)."""
    if selections < 1:
        raise ConfigError(f"the selection count t starts at 1, got {selections}")
    return 1.0 - 1.0 / selections


def menu_item_time_s(
    costs: CostSettings, n_items: int, item_index: int, item_probability: float, selection: int
) -> float:
    """Search-decision-pointing time (s) of the ``selection``-th selection of a menu item.

    Pointing runs from the menu header to the item: D = (index + 0.5) h, W = h, h the item height.
    """
    m = costs.menu
    e = menu_expertise(selection)
    search = m.search_intercept_s + m.search_slope_s_per_item * n_items
    decision = hick_hyman_time_s(item_probability, m.decision_intercept_s, m.decision_slope_s_per_bit)
    h = m.item_height_px
    pointing = fitts_time_s((item_index + 0.5) * h, h, costs.fitts.intercept_s, costs.fitts.slope_s_per_bit)
    return (1.0 - e) * search + e * decision + pointing


def menu_time_s(
    costs: CostSettings,
    n_items: int,
    item_index: int,
    item_probability: float,
    selection: int,
    hand_on_keyboard: bool,
    include_mental: bool = True,
) -> float:
    """Whole menu selection (s): [M] + [H] + P to the header + click + item time + click."""
    k = costs.klm
    t = k.mental_s if include_mental else 0.0
    if hand_on_keyboard:
        t += k.home_s
    t += k.point_s + 2 * k.button_s
    t += menu_item_time_s(costs, n_items, item_index, item_probability, selection)
    t += 2 * k.button_s
    return t


def hotkey_time_s(
    costs: CostSettings, keystrokes: int, hand_on_keyboard: bool, recall_latency_s: float
) -> float:
    """Successful hotkey (s): M + [H] + recall latency + keystrokes x K (Card et al. 1980)."""
    k = costs.klm
    t = k.mental_s + (0.0 if hand_on_keyboard else k.home_s) + recall_latency_s
    return t + keystrokes * k.k_s
