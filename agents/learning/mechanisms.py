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
sensible behaviour in the demo scenario. So are the plausible ranges (``ParamSpec.plausible``)
where fits draw their random starts and recovery studies their true values: learning rates
0.02-0.95, inverse temperatures and choice-kernel weights 0.1-10 (1/s and logit units; the low
end is a noisy participant, whose choices move less than 1 logit per 10 s of expected time),
recall_rate 0.05-0.95, horizon_uses 0.5-50, incidental_rate 0.005-0.3, forget_rate_per_h
0.001-0.5, stickiness -2 to 3, lapse 0.005-0.2.

Every mechanism except ``memory_aware`` has parameter values that switch it off (``off``:
beta = 0, beta_ck = 0, horizon_uses = 0, incidental_rate = 0, forget_rate_per_h = 0,
stickiness = 0, lapse = 0), so a model with it nests the model without it.
"""

from __future__ import annotations

from collections.abc import Iterable
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
    #: parameter values at which the mechanism has no effect on any choice (None: there are none);
    #: a model with the mechanism then equals the model without it, so it nests that model
    off: tuple[tuple[str, float], ...] | None = None


MECHANISMS: dict[str, Mechanism] = {
    m.name: m
    for m in (
        Mechanism("value", M_VALUE, (
            (P_ALPHA, ParamSpec("alpha", 0.3, 0.0, 1.0, "logit", "delta-rule learning rate", (0.02, 0.95))),
            (P_BETA, ParamSpec("beta", 3.0, 0.0, 50.0, "logit", "softmax inverse temperature (1/s)", (0.1, 10.0))),
        ), doc="delta rule on action values per command, softmax", off=(("beta", 0.0),)),
        Mechanism("choice_kernel", M_CHOICE_KERNEL, (
            (P_ALPHA_CK, ParamSpec("alpha_ck", 0.1, 0.0, 1.0, "logit", "choice-kernel learning rate", (0.02, 0.95))),
            (P_BETA_CK, ParamSpec("beta_ck", 1.0, 0.0, 50.0, "logit", "choice-kernel weight (logit units)",
                                             (0.1, 10.0))),
        ), doc="habit trace over actions shared by all commands", off=(("beta_ck", 0.0),)),
        Mechanism("memory_aware", M_MEMORY_AWARE, (
            (P_RECALL_RATE, ParamSpec("recall_rate", 0.8, 0.0, 1.0, "logit", "recall-belief learning rate",
                                                 (0.05, 0.95))),
        ), requires=("value",), doc="hotkey valued by expected time from the agent's own recall belief"),
        Mechanism("planning", M_PLANNING, (
            (P_HORIZON_USES, ParamSpec("horizon_uses", 5.0, 0.0, 1000.0, "logit",
                                       "most future uses the agent plans over", (0.5, 50.0))),
        ), requires=("memory_aware",), doc="value of learning now for expected future uses",
           off=(("horizon_uses", 0.0),)),
        Mechanism("incidental", M_INCIDENTAL, (
            (P_INCIDENTAL, ParamSpec("incidental_rate", 0.05, 0.0, 1.0, "logit",
                                     "recall-belief gain from a menu use", (0.005, 0.3))),
        ), requires=("memory_aware",), doc="menu use teaches the hotkey a little", off=(("incidental_rate", 0.0),)),
        Mechanism("forgetting", M_FORGETTING, (
            (P_FORGET, ParamSpec("forget_rate_per_h", 0.02, 0.0, 10.0, "logit",
                                 "recall-belief decay rate (1/h)", (0.001, 0.5))),
        ), requires=("memory_aware",), doc="recall belief decays with time since last use",
           off=(("forget_rate_per_h", 0.0),)),
        Mechanism("perseveration", M_PERSEVERATION, (
            (P_STICK, ParamSpec("stickiness", 0.5, -10.0, 10.0, "logit",
                                "logit bonus for repeating the command's last action", (-2.0, 3.0))),
        ), doc="repeat the last action chosen for the same command", off=(("stickiness", 0.0),)),
        Mechanism("lapse", M_LAPSE, (
            (P_LAPSE, ParamSpec("lapse", 0.02, 0.0, 0.5, "logit",
                                "probability of a uniform random action; at most 0.5, since beyond it the "
                                "choices carry little information and fits stall on a flat likelihood "
                                "(an assumption of this project)", (0.005, 0.2))),
        ), doc="uniform random action with a small probability", off=(("lapse", 0.0),)),
    )
}

#: Options that are fixed, not fitted: the agent's prior time estimates (s). Assumptions of this
#: project (no source): about a first menu selection, a recalled hotkey and a failed attempt in
#: the demo scenario.
OPTION_DEFAULTS: dict[str, float] = {"prior_time_s": 4.0, "prior_hotkey_s": 2.5, "prior_failure_s": 6.0}
OPTION_SLOTS: dict[str, int] = {"prior_time_s": P_PRIOR_TIME, "prior_hotkey_s": P_PRIOR_HOTKEY,
                                "prior_failure_s": P_PRIOR_FAILURE}


def resolve_mechanisms(owner: str, mechanisms: Iterable[str]) -> tuple[str, ...]:
    """The mechanism list in catalogue order, validated.

    Raises ValueError naming an unknown or repeated mechanism, a mechanism whose requirement is
    not listed, or a list with neither 'value' nor 'choice_kernel'.
    """
    if isinstance(mechanisms, str):
        raise ConfigError(f"{owner}: 'mechanisms' takes a list of names, not a single string ({mechanisms!r})")
    chosen = list(mechanisms)
    for name in chosen:
        if not isinstance(name, str) or name not in MECHANISMS:
            raise ConfigError(f"{owner}: unknown mechanism {name!r}; known: {list(MECHANISMS)}")
    repeated = sorted({n for n in chosen if chosen.count(n) > 1})
    if repeated:
        raise ConfigError(f"{owner}: mechanism(s) {repeated} listed more than once")
    kept = [m for m in MECHANISMS if m in chosen]
    for name in kept:
        for need in MECHANISMS[name].requires:
            if need not in kept:
                raise ConfigError(f"{owner}: mechanism {name!r} needs {need!r}, which is not listed")
    if "value" not in kept and "choice_kernel" not in kept:
        raise ConfigError(f"{owner}: needs 'value' or 'choice_kernel' to choose at all (listed: {kept})")
    return tuple(kept)


def owner_of(param: str) -> str | None:
    """The mechanism a parameter name belongs to (None if none)."""
    for m in MECHANISMS.values():
        if any(spec.name == param for _, spec in m.params):
            return m.name
    return None
