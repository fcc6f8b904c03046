"""The planner's compiled plan lookup takes the single-env planner's action on every trial of every user.

The reference is the planner agent itself on the gymnasium env (``run_episode``: ``act`` /
``observe`` on the info dicts, its Python memory tracking and ``action_values``), one episode
per seed; the compiled fused loop must give the same action sequence, bit for bit, and the same
per-user sums as the Python batch path.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest

from shortcut_gym.agents.planner.batch import PlanLookupBatch
from shortcut_gym.agents.planner.compiled_lookup import CompiledPlanLookup, lookup_tables
from shortcut_gym.agents.rollout import context_of_world, drive_batch, run_episode
from shortcut_gym.envs import BatchSimulator, CommandSelectionEnv, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import UsageError
from shortcut_gym.lab.sweep.batch import build_agent

SEEDS = [0, 5, 17, 2024]
SCHEDULE = {"sessions": 3, "trials_per_session": 14, "gap_h": [20.0, 0.5]}
CHEAP = {"learn": {"encoding_s": 1.5}}  # learning pays often enough that all three actions occur
#: (memory settings, aids, costs): the four memory kinds the planner models, aids off and on
WORLDS: list[tuple[Any, Any, Any]] = [
    ({"kind": "actr"}, None, CHEAP),
    ({"kind": "actr"}, "key_labels", CHEAP),
    ({"kind": "actr", "recent_traces": 1}, "warmup", CHEAP),
    ({"kind": "actr_exact"}, None, CHEAP),
    ({"kind": "actr_exact"}, "menu_lockout", None),
    ({"kind": "exponential", "exponential_rate_per_s": 1e-4}, None, CHEAP),
    ({"kind": "exponential"}, "nudge", CHEAP),
    ({"kind": "power", "decay": 0.4, "power_time_unit_s": 30.0}, None, CHEAP),
    ({"kind": "power"}, "warmup", None),
]
IDS = [f"{m['kind']}-{a or 'no_aids'}-{'cheap' if c else 'default'}" for m, a, c in WORLDS]


def _planner(world: Any, commands: tuple[bool, ...] | None = None) -> Any:
    agent = build_agent({"name": "bounded_optimal", "n_bins": 8, "n_weight_bins": 3, "select_users": 0}, world)
    agent.prepare()
    if commands is not None:
        from dataclasses import replace
        agent.plan = replace(agent.plan, choice=replace(agent.plan.choice, commands=commands))
    return agent


def _compiled_actions(world: Any, agent: Any) -> tuple[np.ndarray, Any]:
    sim = BatchSimulator(world)
    sim.reset(seeds=SEEDS)
    policy = agent.batch_policy(len(SEEDS), SEEDS)
    assert isinstance(policy, CompiledPlanLookup)
    sums = policy.run(sim, record=True)
    return policy.recorded, sums


def _single_env_actions(world: Any, agent: Any) -> np.ndarray:
    env = CommandSelectionEnv(world=world)
    return np.array([[k.ACTION_NAMES.index(a) for a in run_episode(env, agent, seed=s)["action"]] for s in SEEDS])


@pytest.mark.parametrize(("memory", "aids", "costs"), WORLDS, ids=IDS)
def test_compiled_lookup_takes_the_single_env_planners_action_on_every_trial(memory, aids, costs) -> None:
    world = make_world(schedule=SCHEDULE, memory=memory, aids=aids, costs=costs)
    agent = _planner(world)
    assert agent.plan.choice.kind == "plan"
    compiled, sums = _compiled_actions(world, agent)
    single = _single_env_actions(world, agent)
    np.testing.assert_array_equal(compiled, single)
    # and the Python per-user batch path gives the same per-user sums (durations included)
    sim = BatchSimulator(world)
    sim.reset(seeds=SEEDS)
    stepped = drive_batch(sim, agent, SEEDS, fused=False).sums
    for field in ("time_s", "actions", "outcomes", "command_time_s"):
        np.testing.assert_array_equal(getattr(sums, field), getattr(stepped, field), err_msg=field)


def test_the_worlds_exercise_every_action_and_a_restricted_choice_keeps_the_menu_elsewhere() -> None:
    seen: set[int] = set()
    for memory, aids, costs in WORLDS[:3]:
        compiled, _ = _compiled_actions(*(w := make_world(schedule=SCHEDULE, memory=memory, aids=aids, costs=costs),
                                          _planner(w)))
        seen |= set(np.unique(compiled).tolist())
    assert seen == {k.MENU, k.HOTKEY, k.LEARN}  # the equality tests above are not all-menu runs
    world = make_world(schedule=SCHEDULE, costs=CHEAP)
    mask = (True, False) * 6
    agent = _planner(world, mask)
    compiled, _ = _compiled_actions(world, agent)
    np.testing.assert_array_equal(compiled, _single_env_actions(world, agent))
    sim = BatchSimulator(world)
    sim.reset(seeds=SEEDS)
    cmds = sim.sched_command
    left_out = ~np.array(mask)[cmds]
    assert left_out.any() and (compiled[left_out] == k.MENU).all()
    assert (compiled[~left_out] != k.MENU).any()


def test_fused_run_refuses_a_used_policy_and_the_python_path_stays_for_stepping() -> None:
    world = make_world(schedule=SCHEDULE, costs=CHEAP)
    agent = _planner(world)
    agent.bind(context_of_world(world))
    assert lookup_tables(agent) is not None
    sim = BatchSimulator(world)
    sim.reset(seeds=SEEDS)
    policy = agent.batch_policy(len(SEEDS), SEEDS)
    policy.run(sim)
    with pytest.raises(UsageError, match="just reset"):
        policy.run(sim)
    fresh = agent.batch_policy(len(SEEDS), SEEDS)
    sim.reset(seeds=SEEDS)
    fresh.actions(sim.targets().copy(), sim.obs)
    assert isinstance(fresh._stepped, PlanLookupBatch)
    with pytest.raises(UsageError, match="fresh batch policy"):
        fresh.run(sim)


@pytest.mark.parametrize(("memory", "aids", "costs"), [WORLDS[0], WORLDS[2], WORLDS[3], WORLDS[5], WORLDS[8]],
                         ids=[IDS[0], IDS[2], IDS[3], IDS[5], IDS[8]])
def test_without_the_age_table_the_compiled_lookup_still_takes_the_single_env_action(memory, aids, costs,
                                                                                     monkeypatch) -> None:
    from shortcut_gym.agents.planner import compiled_lookup
    world = make_world(schedule=SCHEDULE, memory=memory, aids=aids, costs=costs)
    agent = _planner(world)
    monkeypatch.setattr(compiled_lookup, "AGE_TABLE_MAX_TRIALS", world.horizon - 1)
    agent.bind(context_of_world(world))
    tables = lookup_tables(agent)
    assert tables is not None and tables.ages.shape == (0, 0)  # every decay factor computed in place
    compiled, _ = _compiled_actions(world, agent)
    np.testing.assert_array_equal(compiled, _single_env_actions(world, agent))


def test_the_age_table_holds_each_memory_kinds_decay_factor_of_every_trial_pair() -> None:
    for memory, aids, costs in WORLDS:
        world = make_world(schedule=SCHEDULE, memory=memory, aids=aids, costs=costs)
        agent = _planner(world)
        agent.bind(context_of_world(world))
        tables = lookup_tables(agent)
        assert tables is not None and tables.ages.shape == (world.horizon, world.horizon)
        clock, m = tables.clock, world.memory
        i, j = np.tril_indices(world.horizon, -1)
        later = clock[i] > clock[j]
        age = clock[i][later] - clock[j][later]
        want = {"actr": age ** -m.decay, "actr_exact": age ** -m.decay,
                "exponential": np.exp(-m.exponential_rate_per_s * age),
                "power": (1 + age / m.power_time_unit_s) ** -m.decay}[m.kind]
        np.testing.assert_allclose(tables.ages[i[later], j[later]], want, rtol=1e-13, err_msg=m.kind)
        # every next use sits on the trial it names
        np.testing.assert_array_equal(clock[tables.next_trial], tables.next_clock)


def test_shared_next_use_points_name_the_first_earlier_point_with_the_same_clock_and_share() -> None:
    from shortcut_gym.agents.planner.compiled_lookup import same_points
    rng = np.random.default_rng(3)
    clock = rng.integers(0, 3, size=(2, 5, 8)).astype(float)  # few values: many repeats
    fresh = rng.integers(0, 2, size=(2, 5, 8)) * 0.5
    got = same_points(clock, fresh)
    for c, t, g in np.ndindex(*clock.shape):  # brute force: the first g' < g equal in both
        want = next((h for h in range(g) if clock[c, t, h] == clock[c, t, g] and fresh[c, t, h] == fresh[c, t, g]),
                    -1)
        assert got[c, t, g] == want, (c, t, g)
    # the planner's own tables repeat points (a frequent command's short gaps), so the bit-for-bit
    # tests above run through the shared points
    world = make_world(schedule=SCHEDULE, memory=WORLDS[0][0], aids=WORLDS[0][1], costs=WORLDS[0][2])
    agent = _planner(world)
    agent.bind(context_of_world(world))
    tables = lookup_tables(agent)
    assert tables is not None and (tables.same_point >= 0).any()
    src = tables.same_point
    c, t, g = np.nonzero(src >= 0)
    np.testing.assert_array_equal(tables.next_clock[c, t, g], tables.next_clock[c, t, src[c, t, g]])
    np.testing.assert_array_equal(tables.fresh[c, t, g], tables.fresh[c, t, src[c, t, g]])
