"""Model recovery of the three published learning models on the demo task (Tidepool Logbook).

Wilson & Collins (2019), eLife, "Ten simple rules for the computational modeling of behavioral
data", rule 6: simulate each model, fit all, count how often the generating model wins (lowest
BIC). Participants here have inverse temperatures beta, beta_ck log-uniform in [1, 10]: below
that a participant's choices differ from uniform by a fraction of a logit, and no model can be
told from another (docs/identifiability.md gives the study over the whole plausible range too).
The bar 0.85 for models 3 and 4 is the one set for this project. Model 5 nests both and wins its
own participants far less often (about 0.3 here: its two extra parameters cost 2 ln n = 12 in
BIC, more than the weaker of its two processes earns on 400 trials), so its diagonal is reported
in docs/identifiability.md, not checked.
"""

from __future__ import annotations

import numpy as np

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.population import read_population
from shortcut_gym.lab.checks.recovery import model_recovery

DISTINCT = {"dist": "loguniform", "low": 1.0, "high": 10.0}
POPULATION = {"models": {
    "rescorla_wagner": {"participants": 10, "parameters": {"beta": DISTINCT}},
    "choice_kernel": {"participants": 10, "parameters": {"beta_ck": DISTINCT}},
    "rw_choice_kernel": {"participants": 10, "parameters": {"beta": DISTINCT, "beta_ck": DISTINCT}},
}}


def test_published_models_win_their_own_participants() -> None:
    populations = read_population(POPULATION)
    confusion, fits = model_recovery(make_world(), [p.spec for p in populations], seed=3, n_starts=2,
                                     populations={p.spec.label: p for p in populations})
    assert len(fits) == 3 * 10 * 3 and fits.groupby("generator")["participant"].nunique().eq(10).all()
    assert confusion.loc["rescorla_wagner", "rescorla_wagner"] >= 0.85, confusion
    assert confusion.loc["choice_kernel", "choice_kernel"] >= 0.85, confusion
    assert np.allclose(confusion.sum(axis=1), 1.0)
