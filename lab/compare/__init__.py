"""Model comparison: per participant x model tables and summed criteria (:mod:`.tables`),
random-effects BMS (:mod:`.bms`: variational scheme, omnibus risk) and exceedance probabilities at
any group size (:mod:`.exceedance`); the public names are re-exported here.
"""

from shortcut_gym.lab.compare.bms import BMSResult, random_effects_bms
from shortcut_gym.lab.compare.exceedance import (
    dirichlet_exceedance,
    exact_omnibus_risk,
    exceedance_integral,
    exceedance_monte_carlo,
    exceedance_two_models,
)
from shortcut_gym.lab.compare.tables import bms_of_fits, comparison_table, log_evidence_matrix, summed_criteria

__all__ = ["BMSResult", "bms_of_fits", "comparison_table", "dirichlet_exceedance", "exact_omnibus_risk",
           "exceedance_integral", "exceedance_monte_carlo", "exceedance_two_models", "log_evidence_matrix",
           "random_effects_bms", "summed_criteria"]
