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
        np.testing.assert_array_equal(sim.sched_command[b], sched.command)
        np.testing.assert_array_equal(sim.sched_uniform[b], u)
        np.testing.assert_array_equal(sim.sched_onset[b], sched.onset_s)
        np.testing.assert_array_equal(sim.sched_clock[b], sched.memory_clock_s(world.memory.gap_time_scale))
        got = sim.schedules[b]
        for f in ("command", "onset_s", "session", "gap_total_s"):
            np.testing.assert_array_equal(getattr(got, f), getattr(sched, f), err_msg=f)
    assert world.trace_capacity([sim.schedules[b] for b in range(len(seeds))]) == sim.traces.shape[2]
    # each user's initial observation equals write_obs of that user alone
    for b in (0, 17):
        obs = np.zeros(world.obs_dim, dtype=np.float32)
        k.write_obs(sim.kernel_int_params, sim.kernel_params, world.commands.n_commands, sim.horizon,
                    sim.command_float_state[b], sim.command_counts[b], sim.traces[b], sim.user_state[b],
                    sim.sched_command[b], sim.sched_clock[b], sim.sched_onset[b], obs)
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
        np.testing.assert_array_equal(sim.sched_command[b], ref_draws[b][0].command)
        np.testing.assert_array_equal(sim.sched_uniform[b], ref_draws[b][1])
    assert sim.schedules[1] is replay


def test_reset_rejects_mixed_horizons() -> None:
    world = make_world(schedule=SCHEDULE)
    short = sample_schedule(world.commands, world.with_changes(
        schedule=world.schedule.model_copy(update={"sessions": 1, "gap_h": 24.0})).schedule, np.random.default_rng(1))
    with pytest.raises(ValueError, match="same horizon"):
        BatchSimulator(world).reset(seeds=[1, 2], schedules=[None, short])


def test_compiled_seeding_equals_numpy_default_rng() -> None:
    from shortcut_gym.agents.base import AGENT_STREAM
    from shortcut_gym.envs.simulator import seed_words, seeded_uniforms

    seeds = list(range(200)) + [2**32 - 1, 2**32, 2**40 + 7, 2**63 + 11, 2**64 - 1, 987654321]
    arr = np.array(seeds, dtype=np.uint64)
    for extra in ((), (AGENT_STREAM,), (3, 2**33 + 1)):
        words = seed_words(arr, extra)
        assert words is not None
        out = np.empty((len(seeds), 70))
        seeded_uniforms(words[0], words[1], 70, out)
        ref = np.stack([np.random.default_rng([s, *extra] if extra else s).random(70) for s in seeds])
        np.testing.assert_array_equal(out, ref, err_msg=str(extra))
    assert seed_words(np.array([3, -1])) is None


def test_reset_by_seeds_equals_reset_by_generators() -> None:
    world = make_world(schedule=SCHEDULE, memory="spacing")
    seeds = [0, 5, 2**35 + 1, 77]
    a, b = BatchSimulator(world), BatchSimulator(world)
    a.reset(seeds=seeds)
    b.reset(rngs=[np.random.default_rng(s) for s in seeds])
    for attr in ("sched_command", "sched_uniform", "sched_onset", "sched_clock", "sched_session", "obs", "traces"):
        np.testing.assert_array_equal(getattr(a, attr), getattr(b, attr), err_msg=attr)
    with pytest.raises(ValueError, match="negative"):
        BatchSimulator(world).reset(seeds=[1, -2])


def test_schedules_of_an_earlier_reset_keep_their_users() -> None:
    world = make_world(schedule=SCHEDULE)
    sim = BatchSimulator(world)
    sim.reset(seeds=[1, 2])
    first = sim.schedules
    first_cmd = sim.sched_command.copy()
    sim.reset(seeds=[3, 4])
    assert not np.array_equal(sim.sched_command, first_cmd)
    np.testing.assert_array_equal(first[1].command, first_cmd[1])
    np.testing.assert_array_equal(sim.schedules[1].command, sim.sched_command[1])
    assert [s.horizon for s in first[0:2]] == [world.horizon] * 2


@pytest.mark.parametrize("p", [
    [0.5, 0.5],
    [0.2, 0.0, 0.3, 0.0, 0.5],  # commands never drawn: repeated cdf entries
    list(np.random.default_rng(9).dirichlet(np.full(40, 0.3))),  # many commands, some tiny
], ids=["two", "zeros", "forty"])
def test_compiled_schedules_equal_numpy_choice_then_random(p: list[float]) -> None:
    """seeded_schedules' commands and uniforms are ``rng.choice(m, size=h, p=p)`` then ``rng.random(h)``
    of ``default_rng(seed)``, for command distributions with zeros and with many commands."""
    from shortcut_gym.envs.simulator import seed_words, seeded_schedules

    probs = np.asarray(p)
    cdf = probs.cumsum()
    cdf /= cdf[-1]
    seeds = list(range(60)) + [2**40 + 3, 2**64 - 1]
    words = seed_words(np.array(seeds, dtype=np.uint64))
    assert words is not None
    h = 150
    command = np.empty((len(seeds), h), dtype=np.int64)
    uniforms = np.empty((len(seeds), h))
    seeded_schedules(words[0], words[1], cdf, command, uniforms)
    for b, s in enumerate(seeds):
        rng = np.random.default_rng(s)
        np.testing.assert_array_equal(command[b], rng.choice(len(probs), size=h, p=probs), err_msg=str(s))
        np.testing.assert_array_equal(uniforms[b], rng.random(h), err_msg=str(s))
    assert set(np.unique(command)) <= set(np.flatnonzero(probs > 0))
