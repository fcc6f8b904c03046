"""Trial-by-trial learning models composed from switchable mechanisms.

One class, :class:`LearningAgent`, configured by a list of mechanism names (:mod:`.mechanisms`,
the catalogue), registered as the three published models (``rescorla_wagner``, ``choice_kernel``,
``rw_choice_kernel``) and as ``composed_learner`` with the mechanisms the user lists (:mod:`.presets`).
Every rule runs in numba functions over state arrays with a leading user axis (:mod:`.rules`), shared by the paths that
therefore give the same probabilities:

* the single agent (``act`` / ``action_probabilities`` / ``observe``, a batch of one; :mod:`.agent`),
* :meth:`LearningAgent.batch_policy`, many simulated users at once (:mod:`.batch`), whose ``run``
  drives a whole batched simulation in one compiled loop (:mod:`.fused`),
* :meth:`LearningAgent.likelihood_function`, a compiled log-likelihood over a logged trial table
  (:class:`TrialArrays`, :mod:`.trials`).

Only the ``forgetting`` mechanism reads the observation (:mod:`.features`).

Modules import one way: mechanisms <- rules <- (features, trials, fused) <- batch <- agent <- presets.
"""

from shortcut_gym.agents.learning.agent import LearningAgent
from shortcut_gym.agents.learning.batch import BatchLearningPolicy
from shortcut_gym.agents.learning.features import DT_FEATURE, decode_dt_s, dt_feature_index
from shortcut_gym.agents.learning.mechanisms import MECHANISMS, OPTION_DEFAULTS, Mechanism, owner_of, resolve_mechanisms
from shortcut_gym.agents.learning.presets import (
    COMPOSED,
    ChoiceKernelAgent,
    ComposedLearner,
    PublishedLearningModel,
    RescorlaWagnerAgent,
    RWChoiceKernelAgent,
)
from shortcut_gym.agents.learning.rules import LearnerState, RuleSet, sample_action
from shortcut_gym.agents.learning.trials import TrialArrays

__all__ = [
    "COMPOSED",
    "DT_FEATURE",
    "MECHANISMS",
    "OPTION_DEFAULTS",
    "BatchLearningPolicy",
    "ChoiceKernelAgent",
    "ComposedLearner",
    "LearnerState",
    "LearningAgent",
    "Mechanism",
    "PublishedLearningModel",
    "RWChoiceKernelAgent",
    "RescorlaWagnerAgent",
    "RuleSet",
    "TrialArrays",
    "decode_dt_s",
    "dt_feature_index",
    "owner_of",
    "resolve_mechanisms",
    "sample_action",
]
