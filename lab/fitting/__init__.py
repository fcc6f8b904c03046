"""Maximum-likelihood (and MAP) fitting of agents to trial logs, one participant at a time.

Modules: :mod:`.criteria` (AIC, BIC), :mod:`.specs` (what to fit), :mod:`.replay` (the
log-likelihood of a model on a log), :mod:`.priors` (MAP priors), :mod:`.starts` (plausible
ranges, random starts), :mod:`.nesting` (warm starts from nested models), :mod:`.uncertainty`
(standard errors, intervals, the long table), :mod:`.optimise` (one participant, with its
diagnostics), :mod:`.runner` (many participants x models), :mod:`.durations` (operator times from
trial durations; :mod:`.durations_group` the same under the hierarchical EM), :mod:`.joint`
(choices and durations together), :mod:`.laplace_em` and
:mod:`.hierarchical` (hierarchical fits by EM with Gaussian group priors), :mod:`.crossval`
(leave-one-session-out predictive log-likelihood). The public names are re-exported here.
"""

from shortcut_gym.lab.fitting.criteria import aic, bic
from shortcut_gym.lab.fitting.crossval import cross_validate, cv_summary, cv_table
from shortcut_gym.lab.fitting.durations import (
    DURATION_PARAMETERS,
    DurationFit,
    DurationFitError,
    fit_durations,
    fit_log_durations,
    implied_world,
)
from shortcut_gym.lab.fitting.hierarchical import (
    HierarchicalFit,
    fit_hierarchical,
    fit_hierarchical_models,
    hierarchical_tables,
)
from shortcut_gym.lab.fitting.joint import joint_table
from shortcut_gym.lab.fitting.laplace_em import EMResult, em_laplace
from shortcut_gym.lab.fitting.nesting import nested_start
from shortcut_gym.lab.fitting.optimise import FREE_LIMIT, UNBOUNDED_LIMIT, FitResult, draw_start, fit_participant
from shortcut_gym.lab.fitting.priors import PRIOR_FAMILIES, make_prior
from shortcut_gym.lab.fitting.replay import LogLik, loglik_function, replay_probabilities
from shortcut_gym.lab.fitting.runner import context_for, fit_log, fitted_agent
from shortcut_gym.lab.fitting.specs import ModelSpec
from shortcut_gym.lab.fitting.starts import draw_in_range, plausible_range
from shortcut_gym.lab.fitting.uncertainty import INTERVAL_METHODS, long_table

__all__ = [
    "DURATION_PARAMETERS", "DurationFit", "DurationFitError", "fit_durations", "fit_log_durations", "implied_world",
    "joint_table",
    "FREE_LIMIT", "PRIOR_FAMILIES", "UNBOUNDED_LIMIT", "EMResult", "FitResult", "HierarchicalFit", "LogLik",
    "ModelSpec", "aic", "bic", "context_for", "cross_validate", "cv_summary", "cv_table", "draw_start",
    "em_laplace", "fit_hierarchical",
    "fit_hierarchical_models", "hierarchical_tables",
    "fit_log", "fit_participant", "fitted_agent", "loglik_function", "make_prior",
    "replay_probabilities", "INTERVAL_METHODS", "draw_in_range", "long_table", "nested_start", "plausible_range",
]
