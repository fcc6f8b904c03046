"""Every entry point taking seeds refuses a float, a bool, a negative or a too-large seed, naming the
entry point, the argument, the position and the value (nothing truncated, no bare numpy error);
good seeds of any integer type give the numbers plain ints give."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.base import BatchAgent
from shortcut_gym.agents.rollout import context_of_world, evaluate_agent
from shortcut_gym.envs import ENV_ID, BatchSimulator, make_world
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.simulate import simulate_agents
from shortcut_gym.lab.sweep.batch import simulate_users

SCHEDULE = {"sessions": 2, "trials_per_session": 4, "gap_h": 24.0}
#: (bad seed, the words naming its fault)
BAD = [(1.5, r"1\.5 is not a whole number \(a float\)"), (2.0, r"2\.0 is not a whole number \(a float\)"),
       (np.float64(3.0), r"np\.float64\(3\.0\) is not a whole number \(a float64\)"),
       ("7", r"'7' is not a whole number \(a str\)"), (True, "True is a bool, not a whole number"),
       (np.bool_(False), "np.False_ is a bool, not a whole number"), (-3, "-3 is negative"),
       (np.int64(-1), r"np\.int64\(-1\) is negative"), (2**63, "9223372036854775808 exceeds 2\\*\\*63 - 1")]
TAIL = r"; seeds are whole numbers in 0 \.\. 2\*\*63 - 1"
BATCH_AGENTS = [("always_menu", {}), ("always_hotkey", {}), ("random", {}), ("learn_first_k", {"k": 1}),
                ("static_softmax", {}), ("rescorla_wagner", {}), ("q_learning", {}),
                ("bounded_optimal", {"n_bins": 8, "n_weight_bins": 3}),
                ("planned_choice", {"beta": 3.0, "n_bins": 8, "n_weight_bins": 3})]


def _world():
    return make_world(schedule=SCHEDULE)


@pytest.mark.parametrize("bad,words", BAD)
def test_library_entry_points_refuse_bad_seeds_by_position(bad: object, words: str) -> None:
    world = _world()
    menu = {"name": "always_menu"}
    with pytest.raises(ConfigError, match=rf"^simulate_users: seeds\[1\] = {words}{TAIL}"):
        simulate_users(world, menu, [4, bad])
    with pytest.raises(ConfigError, match=rf"^simulate_users: seeds\[1\] = {words}"):
        simulate_users(world, menu, [4, bad], record="trials")
    with pytest.raises(ConfigError, match=rf"^simulate_agents: seeds\[2\] = {words}{TAIL}"):
        simulate_agents(world, [menu], [4, 5, bad])
    with pytest.raises(ConfigError, match=rf"^evaluate_agent: seeds\[0\] = {words}{TAIL}"):
        evaluate_agent(gym.make(ENV_ID, schedule=SCHEDULE), make_agent("always_menu"), [bad, 4])
    with pytest.raises(ConfigError, match=rf"^BatchSimulator.reset: seeds\[1\] = {words}{TAIL}"):
        BatchSimulator(world).reset(seeds=[4, bad])
    with pytest.raises(ConfigError, match=rf"^reset: seed = {words}{TAIL}"):
        gym.make(ENV_ID, schedule=SCHEDULE).reset(seed=bad)


@pytest.mark.parametrize("name,opts", BATCH_AGENTS)
def test_every_batch_policy_refuses_bad_seeds_by_position(name: str, opts: dict) -> None:
    agent = make_agent(name, **opts)
    assert isinstance(agent, BatchAgent)
    agent.bind(context_of_world(_world()))
    for bad, words in BAD:
        with pytest.raises(ConfigError, match=rf"^{name}.batch_policy: seeds\[2\] = {words}{TAIL}"):
            agent.batch_policy(3, [0, 1, bad])


def test_integer_seeds_of_any_type_give_the_plain_int_numbers() -> None:
    world = _world()
    spec = {"name": "random"}
    plain = simulate_users(world, spec, [3, 2**63 - 1, 0]).sums.time_s
    typed = simulate_users(world, spec, np.array([3, 2**63 - 1, 0], dtype=np.int64)).sums.time_s
    np.testing.assert_array_equal(plain, typed)
    env = gym.make(ENV_ID, schedule=SCHEDULE)
    a = env.reset(seed=np.int64(9))[1]["target"]
    b = env.reset(seed=9)[1]["target"]
    assert a == b
    assert len(evaluate_agent(env, make_agent("always_menu"), np.arange(2))) == 2


@pytest.mark.parametrize("bad", [0, -5, 2.5, 4.0, True, "8", None])
def test_simulate_users_refuses_a_bad_chunk_size_naming_it(bad: object) -> None:
    with pytest.raises(ConfigError, match=rf"^simulate_users: chunk_users must be a whole number >= 1, got {bad!r}$"):
        simulate_users(_world(), {"name": "always_menu"}, [1, 2, 3], chunk_users=bad)  # type: ignore[arg-type]


@pytest.mark.parametrize("chunk", [1, 2, 3, 50])
def test_every_good_chunk_size_gives_the_same_users(chunk: int) -> None:
    world, spec, seeds = _world(), {"name": "random"}, [8, 3, 11, 4, 9]
    whole = simulate_users(world, spec, seeds, chunk_users=len(seeds))
    parts = simulate_users(world, spec, seeds, chunk_users=chunk)
    np.testing.assert_array_equal(parts.sums.time_s, whole.sums.time_s)
    np.testing.assert_array_equal(parts.seeds, seeds)


@pytest.mark.parametrize("bad,words", BAD)
def test_the_frozen_policies_own_seed_checks_match_the_entry_points(bad: object, words: str) -> None:
    """The frozen batch policy and the per-user draws check their seeds as every entry point does
    (0 .. 2**63 - 1, named by position), not by the wider range the generator seeding accepts."""
    from shortcut_gym.agents.frozen_policy import UserDraws, frozen_policy

    agent = make_agent("static_softmax")
    agent.bind(context_of_world(_world()))
    rule = agent.batch_policy(2, [0, 1]).rule
    with pytest.raises(ConfigError, match=rf"^static_softmax: seeds\[1\] = {words}{TAIL}"):
        frozen_policy(agent, 2, [0, bad], lambda uses, sessions: rule)
    with pytest.raises(ConfigError, match=rf"^draws: seeds\[1\] = {words}{TAIL}"):
        UserDraws("draws", [0, bad])


def test_the_largest_seed_draws_as_the_generator_it_names() -> None:
    """2**63 - 1, the largest seed accepted, seeds the compiled draws as ``agent_rng`` would."""
    from shortcut_gym.agents.base import agent_rng
    from shortcut_gym.agents.frozen_policy import UserDraws

    p = np.tile([0.2, 0.5, 0.3], (2, 1))
    seeds = [2**63 - 1, 2**62 + 5]
    draws = UserDraws("draws", seeds)
    got = np.stack([draws.sample(p) for _ in range(50)], axis=1)
    gens = [agent_rng(s) for s in seeds]
    want = np.array([[g.choice(3, p=p[0]) for _ in range(50)] for g in gens])
    np.testing.assert_array_equal(got, want)
