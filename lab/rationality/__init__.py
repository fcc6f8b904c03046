"""Was each participant bounded-optimal? Their choices against the yardstick planner in their own world.

:mod:`.analysis` (per participant and group tables) and :mod:`.report` (tables, figures and report
text written out).
"""

from shortcut_gym.lab.rationality.analysis import (
    DEFAULT_SIMS,
    PLANNED,
    PlannerOptions,
    RationalityResult,
    SimulatedLoss,
    assess_choices,
    group_summary,
    own_world,
    rationality_analysis,
    simulated_time_lost,
)

__all__ = ["DEFAULT_SIMS", "PLANNED", "PlannerOptions", "RationalityResult", "SimulatedLoss", "assess_choices",
           "group_summary", "own_world", "rationality_analysis", "simulated_time_lost"]
