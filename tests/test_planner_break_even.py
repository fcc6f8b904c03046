"""The break-even verdict against the simulation it predicts, on a grid including hard recall."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.planner import break_even_table, learn_once_recall
from shortcut_gym.agents.planner.selection import simulate
from shortcut_gym.envs import make_world

USERS = list(range(48))  # scored users: not the simulated users the rule reads its recall from
# thresholds from the default -3.5 to hard recall (-2, -1.5), a day and a month between sessions,
# a fast typist with cheap learning and a slow one with dear learning (K s, encoding s)
GRID = list(itertools.product((-3.5, -2.0, -1.5), (24.0, 720.0), ((0.08, 0.5), (0.5, 8.0))))


@pytest.mark.parametrize("tau,gap_h,typing", GRID)
def test_break_even_verdict_agrees_with_a_common_random_numbers_simulation(tau, gap_h, typing):
    """learning_pays predicts, per command, the sign of always-menu's time minus learn-first-1's
    time on that command's own trials. On the same 48 users for both policies (paired), it must
    agree wherever the simulated saving is clear of noise (|mean| > 2 standard errors of the
    paired difference), and most commands must be clear. The rule with the planner's own memory
    model disagreed on 4 of 211 clear commands of a similar grid (18 cells, 64 users)."""
    keystroke_s, encoding_s = typing
    world = make_world(costs={"klm": {"keystroke_s": keystroke_s}, "learn": {"encoding_s": encoding_s}},
                       memory={"threshold": tau}, schedule={"sessions": 4, "trials_per_session": 30, "gap_h": gap_h})
    pays = break_even_table(world)["learning_pays"].to_numpy()
    _, menu = simulate(world, make_agent("always_menu"), USERS)
    _, learn = simulate(world, make_agent("learn_first_k", k=1), USERS)
    saving = menu - learn
    mean, se = saving.mean(axis=0), saving.std(axis=0, ddof=1) / np.sqrt(len(USERS))
    clear = np.abs(mean) > 2 * se
    assert clear.sum() >= 9, (mean.round(2), se.round(2))
    assert np.array_equal((mean > 0)[clear], pays[clear]), (mean.round(2), se.round(2), pays)


def test_learn_once_recall_is_the_simulators_recall_along_the_path():
    """The recall the rule reads follows the simulator's memory: at hard recall (threshold -2) the
    top command's first later use is recalled less often than with easy recall (-3.5); every
    probability and hand share is in [0, 1]."""
    easy, hard = (learn_once_recall(make_world(memory={"threshold": t},
                                               schedule={"sessions": 4, "trials_per_session": 30}), 64)
                  for t in (-3.5, -2.0))
    assert hard[0][0, 0] < easy[0][0, 0] - 0.05
    assert np.all((hard[0][:, 0] >= 0) & (hard[0][:, 0] <= 1)) and np.all(hard[0][:, 2] <= 1)
    with pytest.raises(ValueError, match="n_users must be a whole number >= 1"):
        learn_once_recall(make_world(), 0)
