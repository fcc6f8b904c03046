"""The per-trial rationality table carries what ``q_time_lost_s`` is computed from: the executed
policy's priced values and the midpoint hand shares they are priced at, so a reader can recompute
every row. The shares are checked against the trial table and the planner's plan independently."""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.planned_choice import cached_plan
from shortcut_gym.agents.planner.valuation import executed_shares
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import participant_trials, validate_log
from shortcut_gym.lab.rationality.analysis import PlannerOptions, assess_choices

OPTIONS = PlannerOptions()
WORLD = make_world(schedule={"sessions": 2, "trials_per_session": 30}, memory={"kind": "exponential"})
PRICED = {"menu": "priced_menu", "hotkey": "priced_hotkey", "learn": "priced_learn"}


@pytest.mark.parametrize("agent", [("always_menu", {}), ("learn_first_k", {"k": 1}), ("random", {}),
                                   ("always_hotkey", {})])
def test_q_time_lost_is_the_priced_difference_on_every_row(agent: tuple[str, dict]) -> None:
    name, params = agent
    rng = np.random.default_rng(11)
    log = validate_log(simulate_log(WORLD, make_agent(name, **params), 2, rng, prefix="p"), WORLD.commands)
    planner = cached_plan(WORLD, OPTIONS.keyboard_share, OPTIONS.n_bins, OPTIONS.n_weight_bins, OPTIONS.select_users)
    ks_opt, q_opt = executed_shares(WORLD, planner.plan)
    for pid in log["participant"].unique():
        trials = participant_trials(log, pid)
        table = assess_choices(trials, WORLD, OPTIONS)
        best = np.array([row[PRICED[a]] for a, (_, row) in zip(table["optimal_action"], table.iterrows(), strict=True)])
        took = np.array([row[PRICED[a]] for a, (_, row) in zip(table["action"], table.iterrows(), strict=True)])
        np.testing.assert_array_equal(table["q_time_lost_s"].to_numpy(), best - took)
        # the shares: midpoint of the participant's own (from the trial table) and the optimum's
        on_keyboard = float((trials["outcome"].astype(str) == "hotkey").mean())
        attempts = float((trials["action"].astype(str) == "hotkey").mean())
        np.testing.assert_allclose(table["priced_keyboard_share"], (on_keyboard + ks_opt) / 2, rtol=0, atol=1e-15)
        np.testing.assert_allclose(table["priced_next_hotkey_share"], (attempts + q_opt) / 2, rtol=0, atol=1e-15)
        # priced values are minus expected seconds: negative, and of the size of the decided values
        priced = table[list(PRICED.values())].to_numpy()
        assert (priced < 0).all()
        decided = table[["q_menu", "q_hotkey", "q_learn"]].to_numpy()
        assert np.abs(priced - decided).max() < 0.5 * np.abs(decided).max()
