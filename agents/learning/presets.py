"""The registered learning models: three published models under their published names, and the
composed learner under a name of our own.

Published models (Wilson & Collins 2019, eLife 8:e49547, "Ten simple rules for the computational
modeling of behavioral data", Box 2, models 3, 4 and 5), applied per command c of the task to the
actions a in {menu, hotkey, learn}, reward r_t = -duration_s of the trial:

* ``rescorla_wagner`` (model 3; alpha, beta): Q[c,a] <- Q[c,a] + alpha (r_t - Q[c,a]) for the
  chosen a, P(a | c) = exp(beta Q[c,a]) / sum_b exp(beta Q[c,b]).
* ``choice_kernel`` (model 4; alpha_ck, beta_ck): CK[a] <- CK[a] + alpha_ck (1[a = a_t] - CK[a])
  for every a, P(a) = exp(beta_ck CK[a]) / sum_b exp(beta_ck CK[b]).
* ``rw_choice_kernel`` (model 5; alpha, beta, alpha_ck, beta_ck):
  P(a | c) proportional to exp(beta Q[c,a] + beta_ck CK[a]), both updated as above.

Starting values: Q[c,a] = -``prior_time_s`` (option, default 4 s; an assumption of this project),
CK[a] = 0 as in the source. The choice kernel is one trace over the three actions, shared by all
commands (the habit of reaching for the menu or the keyboard).

``composed_learner`` has exactly the mechanisms its ``mechanisms=[...]`` lists (no default list;
:mod:`.mechanisms` describes each), for models richer than the published ones.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from shortcut_gym.agents.base import AgentContext
from shortcut_gym.agents.learning import mechanisms as mech
from shortcut_gym.agents.learning.agent import LearningAgent
from shortcut_gym.envs.errors import ConfigError

#: Name of the composable learner (a name of this project, no published model).
COMPOSED = "composed_learner"


class PublishedLearningModel(LearningAgent):
    """A published learning model: fixed mechanisms, no ``mechanisms`` option."""

    def __init__(self, context: AgentContext | None = None, mechanisms: Iterable[str] | None = None,
                 options: dict[str, float] | None = None, **params: Any) -> None:
        if mechanisms is not None and tuple(mechanisms) != self.default_mechanisms:
            raise ConfigError(f"{self.name} is the published model with mechanisms {list(self.default_mechanisms)}; "
                             f"for other mechanisms use {COMPOSED} with mechanisms=[...]")
        super().__init__(context, self.default_mechanisms, options, **params)

    def spec(self) -> dict[str, Any]:
        """Name, options and parameters (the mechanisms are the published model's own)."""
        out = super().spec()
        del out["mechanisms"]
        return out


class RescorlaWagnerAgent(PublishedLearningModel):
    """Wilson & Collins (2019) model 3, delta rule + softmax per command (alpha, beta):
    Q[c,a] += alpha (r - Q[c,a]); P(a|c) = softmax_a(beta Q[c,a])."""

    name = "rescorla_wagner"
    default_mechanisms = ("value",)


class ChoiceKernelAgent(PublishedLearningModel):
    """Wilson & Collins (2019) model 4, choice kernel (alpha_ck, beta_ck):
    CK[a] += alpha_ck (1[a chosen] - CK[a]); P(a) = softmax_a(beta_ck CK[a])."""

    name = "choice_kernel"
    default_mechanisms = ("choice_kernel",)


class RWChoiceKernelAgent(PublishedLearningModel):
    """Wilson & Collins (2019) model 5, delta rule and choice kernel (alpha, beta, alpha_ck, beta_ck):
    P(a|c) = softmax_a(beta Q[c,a] + beta_ck CK[a])."""

    name = "rw_choice_kernel"
    default_mechanisms = ("value", "choice_kernel")


class ComposedLearner(LearningAgent):
    """A learner with exactly the mechanisms listed in ``mechanisms`` (required; see :mod:`.mechanisms`)."""

    name = COMPOSED

    def __init__(self, context: AgentContext | None = None, mechanisms: Iterable[str] | None = None,
                 options: dict[str, float] | None = None, **params: Any) -> None:
        if mechanisms is None:
            raise ConfigError(f"{COMPOSED}: list its mechanisms, e.g. mechanisms=[value,lapse]; known: "
                             f"{list(mech.MECHANISMS)}")
        super().__init__(context, mechanisms, options, **params)
