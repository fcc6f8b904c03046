"""BatchSimulator.reset draws each user's schedule exactly as ``World.draw`` (rng.choice, then rng.random)."""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.envs import BatchSimulator, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.task import sample_schedule

SCHEDULE = {"sessions": 4, "trials_per_session": 25, "gap_h": [2.0, 30.0, 5.5]}


@pytest.mark.parametrize("memory", [None, "spacing"])
def test_reset_draws_equal_world_draw(memory: str | None) -> None:
    world = make_world(schedule=SCHEDULE, memory=memory, observe_recall=True)
    seeds = list(range(40)) + [2**31 + 5, 987654321]
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds)
    for b, seed in enumerate(seeds):
        ref_rng = np.random.default_rng(seed)
        sched, u = world.draw(ref_rng)
        np.testing.assert_array_equal(sim.sched_cmd[b], sched.command)
        np.testing.assert_array_equal(sim.sched_u[b], u)
        np.testing.assert_array_equal(sim.sched_onset[b], sched.onset_s)
        np.testing.assert_array_equal(sim.sched_clock[b], sched.memory_clock_s(world.memory.gap_time_scale))
        got = sim.schedules[b]
        for f in ("command", "onset_s", "session", "gap_total_s"):
            np.testing.assert_array_equal(getattr(got, f), getattr(sched, f), err_msg=f)
    assert world.trace_capacity([sim.schedules[b] for b in range(len(seeds))]) == sim.tr.shape[2]
    # each user's initial observation equals write_obs of that user alone
    for b in (0, 17):
        obs = np.zeros(world.obs_dim, dtype=np.float32)
        k.write_obs(sim.ipar, sim.par, world.commands.n_commands, sim.horizon, sim.fs[b], sim.ist[b], sim.tr[b],
                    sim.us[b], sim.sched_cmd[b], sim.sched_clock[b], sim.sched_onset[b], obs)
        np.testing.assert_array_equal(sim.obs[b], obs)


def test_generators_end_in_the_same_state_and_mixed_replay() -> None:
    world = make_world(schedule=SCHEDULE)
    gens = [np.random.default_rng(s) for s in (4, 5, 6)]
    refs = [np.random.default_rng(s) for s in (4, 5, 6)]
    replay = sample_schedule(world.commands, world.schedule, np.random.default_rng(99))
    sim = BatchSimulator(world)
    sim.reset(rngs=gens, schedules=[None, replay, None])
    ref_draws = [world.draw(refs[0]), world.draw(refs[1], replay), world.draw(refs[2])]
    for b in range(3):
        assert gens[b].bit_generator.state == refs[b].bit_generator.state
        np.testing.assert_array_equal(sim.sched_cmd[b], ref_draws[b][0].command)
        np.testing.assert_array_equal(sim.sched_u[b], ref_draws[b][1])
    assert sim.schedules[1] is replay


def test_reset_rejects_mixed_horizons() -> None:
    world = make_world(schedule=SCHEDULE)
    short = sample_schedule(world.commands, world.with_changes(
        schedule=world.schedule.model_copy(update={"sessions": 1, "gap_h": 24.0})).schedule, np.random.default_rng(1))
    with pytest.raises(ValueError, match="same horizon"):
        BatchSimulator(world).reset(seeds=[1, 2], schedules=[None, short])
