"""The registered learning models: generic names whose only difference is the default mechanism list.

* ``rescorla_wagner``: value + memory_aware + planning + incidental + forgetting + perseveration + lapse
* ``choice_kernel``: choice_kernel + perseveration + lapse
* ``rw_choice_kernel``: every mechanism

``mechanisms=[...]`` replaces the default list, ``without=[...]`` removes names from it; a removed
mechanism's parameters disappear from ``param_specs()``. No default reproduces a published model.
"""

from __future__ import annotations

from shortcut_gym.agents.learning import mechanisms as mech
from shortcut_gym.agents.learning.agent import LearningAgent


class RescorlaWagnerAgent(LearningAgent):
    """Delta-rule action values per command with the memory, planning and choice mechanisms."""

    name = "rescorla_wagner"
    default_mechanisms = ("value", "memory_aware", "planning", "incidental", "forgetting", "perseveration", "lapse")


class ChoiceKernelAgent(LearningAgent):
    """Habit (choice kernel) with perseveration and lapse, no value learning."""

    name = "choice_kernel"
    default_mechanisms = ("choice_kernel", "perseveration", "lapse")


class RWChoiceKernelAgent(LearningAgent):
    """Delta-rule values and a choice kernel together, with every other mechanism."""

    name = "rw_choice_kernel"
    default_mechanisms = tuple(mech.MECHANISMS)
