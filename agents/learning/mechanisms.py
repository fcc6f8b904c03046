"""Named, individually switchable mechanisms of the trial-by-trial learning models.

Each mechanism owns its parameters; switching a mechanism off removes them from the agent's
``param_specs()``. The update and choice rules themselves live in compiled form in
:mod:`shortcut_gym.agents.learning.rules`; this module is the catalogue (names, parameters, bounds,
dependencies) that the agent, the lab's knock-out studies and the YAML specs read.

Mechanisms (rules written per command c, action a in {menu, hotkey, learn}, reward r = -seconds):

* ``value``: delta rule on the value of each action per command, Q[c,a] += alpha (r - Q[c,a])
  (Rescorla & Wagner 1972; the form of Wilson & Collins 2019, eLife, "Ten simple rules for the
  computational modeling of behavioral data", model 3), read through a softmax with inverse
  temperature ``beta`` (1/s).
* ``choice_kernel``: a habit trace over actions shared by all commands,
  K[a] += alpha_ck (1[a chosen] - K[a]), added to the logits with weight ``beta_ck``
  (Wilson & Collins 2019, model 4; combined with ``value`` it is their model 5).
* ``memory_aware``: the value of the hotkey is the expected time p T_ok + (1 - p) T_fail, with
  p the agent's own belief that it can recall the command's hotkey, moved by a delta rule at
  rate ``recall_rate`` toward 1 after learning and toward the outcome (1 recalled, 0 not) after a
  hotkey attempt; T_ok and T_fail are delta-rule estimates (rate alpha) of the durations of
  recalled and failed attempts. Built only from the agent's experience, never from the
  simulator's hidden recall probability.
* ``planning``: look-ahead over the command's expected future uses (computational rationality,
  Lewis, Howes & Singh 2014, "Computational rationality", Topics in Cognitive Science 6(2)):
  learning (and incidental exposure) gains U x [min(T_menu, E_hk(p)) - min(T_menu, E_hk(p'))],
  with p' the belief after the action and U = min(``horizon_uses``, f_c x trials left), f_c the
  agent's running estimate of how often the command comes up.
* ``incidental``: a menu use also moves the recall belief toward 1, at rate ``incidental_rate``.
* ``forgetting``: the recall belief decays as exp(-``forget_rate_per_h`` x hours since the
  command's last use).
* ``perseveration``: a bonus ``stickiness`` (logit units) on the action last chosen for the same
  command (negative values favour switching).
* ``lapse``: with probability ``lapse`` the action is drawn uniformly.

Default values of the parameters are assumptions of this project (no source), chosen to give
sensible behaviour in the demo scenario.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

from shortcut_gym.agents.base import ParamSpec
from shortcut_gym.envs.errors import ConfigError

#: Mechanism flag positions in the compiled kernel's flag vector.
(M_VALUE, M_CHOICE_KERNEL, M_MEMORY_AWARE, M_PLANNING, M_INCIDENTAL, M_FORGETTING, M_PERSEVERATION,
 M_LAPSE) = range(8)
N_MECH = 8

#: Parameter positions in the compiled kernel's full parameter vector.
(P_ALPHA, P_BETA, P_ALPHA_CK, P_BETA_CK, P_RECALL_RATE, P_HORIZON_USES, P_INCIDENTAL, P_FORGET,
 P_STICK, P_LAPSE, P_PRIOR_TIME, P_PRIOR_HOTKEY, P_PRIOR_FAILURE) = range(13)
N_FULL_PAR = 13


@dataclass(frozen=True)
class Mechanism:
    """A switchable piece of a learning model: its flag, its parameters, what it needs."""

    name: str
    flag: int
    params: tuple[tuple[int, ParamSpec], ...]
    requires: tuple[str, ...] = ()
    doc: str = ""


MECHANISMS: dict[str, Mechanism] = {
    m.name: m
    for m in (
        Mechanism("value", M_VALUE, (
            (P_ALPHA, ParamSpec("alpha", 0.3, 0.0, 1.0, "logit", "delta-rule learning rate")),
            (P_BETA, ParamSpec("beta", 3.0, 0.0, 50.0, "logit", "softmax inverse temperature (1/s)")),
        ), doc="delta rule on action values per command, softmax"),
        Mechanism("choice_kernel", M_CHOICE_KERNEL, (
            (P_ALPHA_CK, ParamSpec("alpha_ck", 0.1, 0.0, 1.0, "logit", "choice-kernel learning rate")),
            (P_BETA_CK, ParamSpec("beta_ck", 1.0, 0.0, 50.0, "logit", "choice-kernel weight (logit units)")),
        ), doc="habit trace over actions shared by all commands"),
        Mechanism("memory_aware", M_MEMORY_AWARE, (
            (P_RECALL_RATE, ParamSpec("recall_rate", 0.8, 0.0, 1.0, "logit", "recall-belief learning rate")),
        ), requires=("value",), doc="hotkey valued by expected time from the agent's own recall belief"),
        Mechanism("planning", M_PLANNING, (
            (P_HORIZON_USES, ParamSpec("horizon_uses", 5.0, 0.0, 1000.0, "logit",
                                       "most future uses the agent plans over")),
        ), requires=("memory_aware",), doc="value of learning now for expected future uses"),
        Mechanism("incidental", M_INCIDENTAL, (
            (P_INCIDENTAL, ParamSpec("incidental_rate", 0.05, 0.0, 1.0, "logit",
                                     "recall-belief gain from a menu use")),
        ), requires=("memory_aware",), doc="menu use teaches the hotkey a little"),
        Mechanism("forgetting", M_FORGETTING, (
            (P_FORGET, ParamSpec("forget_rate_per_h", 0.02, 0.0, 10.0, "logit",
                                 "recall-belief decay rate (1/h)")),
        ), requires=("memory_aware",), doc="recall belief decays with time since last use"),
        Mechanism("perseveration", M_PERSEVERATION, (
            (P_STICK, ParamSpec("stickiness", 0.5, -10.0, 10.0, "logit",
                                "logit bonus for repeating the command's last action")),
        ), doc="repeat the last action chosen for the same command"),
        Mechanism("lapse", M_LAPSE, (
            (P_LAPSE, ParamSpec("lapse", 0.02, 0.0, 0.5, "logit",
                                "probability of a uniform random action; at most 0.5, since beyond it the "
                                "choices carry little information and fits stall on a flat likelihood "
                                "(an assumption of this project)")),
        ), doc="uniform random action with a small probability"),
    )
}

#: Options that are fixed, not fitted: the agent's prior time estimates (s). Assumptions of this
#: project (no source): about a first menu selection, a recalled hotkey and a failed attempt in
#: the demo scenario.
OPTION_DEFAULTS: dict[str, float] = {"prior_time_s": 4.0, "prior_hotkey_s": 2.5, "prior_failure_s": 6.0}
OPTION_SLOTS: dict[str, int] = {"prior_time_s": P_PRIOR_TIME, "prior_hotkey_s": P_PRIOR_HOTKEY,
                                "prior_failure_s": P_PRIOR_FAILURE}


def resolve_mechanisms(owner: str, defaults: Sequence[str], mechanisms: Iterable[str] | None,
                       without: Iterable[str] | None) -> tuple[str, ...]:
    """The mechanism list: ``mechanisms`` (or ``defaults``) minus ``without``, validated.

    Raises ValueError naming an unknown mechanism, a removal of a mechanism that is not on, or a
    mechanism whose requirement is switched off.
    """
    chosen = list(defaults if mechanisms is None else mechanisms)
    if isinstance(mechanisms, str) or isinstance(without, str):
        raise ConfigError(f"{owner}: 'mechanisms' and 'without' take lists of names, not a single string")
    for name in chosen + list(without or ()):
        if name not in MECHANISMS:
            raise ConfigError(f"{owner}: unknown mechanism {name!r}; known: {list(MECHANISMS)}")
    for name in without or ():
        if name not in chosen:
            raise ConfigError(f"{owner}: cannot switch off {name!r}: it is not on (on: {chosen})")
    kept = [m for m in MECHANISMS if m in chosen and m not in set(without or ())]
    for name in kept:
        for need in MECHANISMS[name].requires:
            if need not in kept:
                raise ConfigError(f"{owner}: mechanism {name!r} needs {need!r}, which is switched off")
    if "value" not in kept and "choice_kernel" not in kept:
        raise ConfigError(f"{owner}: needs 'value' or 'choice_kernel' to choose at all (on: {kept})")
    return tuple(kept)


def owner_of(param: str) -> str | None:
    """The mechanism a parameter name belongs to (None if none)."""
    for m in MECHANISMS.values():
        if any(spec.name == param for _, spec in m.params):
            return m.name
    return None
