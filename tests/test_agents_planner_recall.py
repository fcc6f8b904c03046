"""The plan's two-number memory against the simulator: recall along the plan's own path.

The plan's state occupancy under its own policy from the no-trace state gives, at each use of a
command, its expected recall probability in the plan's model (lumped traces, gap quantiles); the
truth is the kernel's recall probability at that use, averaged over simulated users running the
planner. Exponential memory is exact in the lump; ACT-R (the simulator's O(1) hybrid base level)
and power forgetting age the old traces as one lump (approximation 1 of agents/planner/).
Bound: the mean error over a command's later uses within 0.02 (measured at most 0.014 in size on
these worlds), each use's error within 0.2 (measured up to 0.167, at the first few uses,
where a first use early in a session is followed the same day more often than the plan's
unconditional gap law says: the note at the end of approximation 1).
"""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents.planned_choice import cached_plan
from shortcut_gym.agents.planner.search import expected_uses
from shortcut_gym.agents.planner.solver import state_occupancy
from shortcut_gym.agents.rollout import context_of_world, drive_batch
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import make_world

USERS = 512
WORLDS = {
    "actr default": {},
    "actr dear learning, 7 day gaps": {"costs": {"learn": {"encoding_s": 3.0}}, "gap_h": 168.0},
    "actr cheap learning, 1 h gaps": {"costs": {"learn": {"encoding_s": 0.5}}, "gap_h": 1.0},
    "power default": {"memory": {"kind": "power"}},
    "exponential default": {"memory": {"kind": "exponential"}},
}


@pytest.mark.parametrize("name", sorted(WORLDS))
def test_the_plans_recall_along_its_own_path_is_the_simulators(name):
    settings = WORLDS[name]
    schedule = {"sessions": 4, "trials_per_session": 40}
    if "gap_h" in settings:
        schedule["gap_h"] = settings["gap_h"]
    world = make_world(schedule=schedule, costs=settings.get("costs"), memory=settings.get("memory"))
    agent = cached_plan(world, None, 20, 5, 0)
    plan = agent.plan
    seeds = list(range(5000, 5000 + USERS))
    agent.bind(context_of_world(world))
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds)
    commands = np.array(sim.sched_command, copy=True)
    trials = drive_batch(sim, agent, seeds, keep_trials=True).trials
    assert trials is not None
    checked = 0
    for c in range(4):  # the four most frequent commands: enough users reach each use
        mine = commands == c
        order = np.cumsum(mine, axis=1) - 1
        uses = expected_uses(world, c)
        rows = plan.policy[c][np.arange(uses, 0, -1)]
        if not (rows != 0).any():
            continue  # the plan never leaves the menu here: nothing to recall
        predicted = state_occupancy(plan.mdps[c], rows) @ plan.mdps[c].p_recall
        simulated = np.array([trials.p_recall[mine & (order == j)].mean() for j in range(uses)])
        err = (predicted - simulated)[1:]
        assert abs(err.mean()) < 0.02, (c, err.mean())
        assert np.abs(err).max() < 0.2, (c, np.abs(err).max())
        checked += 1
    assert checked >= 2
