"""Was each participant bounded-optimal? Their choices against the yardstick planner in their own world.

:mod:`.analysis` (per participant and group tables), :mod:`.plots` (figures) and :mod:`.sections`
(report text).
"""

from shortcut_gym.lab.rationality.analysis import (
    PLANNED,
    PlannerOptions,
    RationalityResult,
    assess_choices,
    group_summary,
    own_world,
    rationality_analysis,
)

__all__ = ["PLANNED", "PlannerOptions", "RationalityResult", "assess_choices", "group_summary", "own_world",
           "rationality_analysis"]
