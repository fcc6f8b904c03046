"""The compiled loops' decay-factor table changes no number.

A fused run of enough users on the world's shared clocks reads each trace's age factor from a table
keyed by (trial now, trial that laid the trace), filled on first use. These tests compare the
tabled runs with the same runs forced onto the plain path and with the looped gymnasium env (which
never uses a table), and check the table's entries against the factor computed from the clocks.
"""

from __future__ import annotations

import math
from typing import Any

import gymnasium as gym
import numpy as np
import pandas as pd
import pytest

import shortcut_gym.envs  # noqa: F401 - registers the env
from shortcut_gym.agents import batch_loop
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.agents.rollout import UserSums, run_episode
from shortcut_gym.envs import ENV_ID, BatchSimulator, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.lab.sweep.batch import build_agent

SCHEDULE = {"sessions": 3, "trials_per_session": 30, "gap_h": [20.0, 0.5]}
SEEDS = list(range(100, 112))  # at least batch_loop.MIN_TABLE_USERS, so the table is used
FIELDS = ("trials", "time_s", "outcomes", "actions", "command_time_s", "command_uses")
STATE = ("command_float_state", "command_counts", "traces", "user_state", "reward", "outcome", "operator_time_s",
         "p_recall", "obs")
MEMORIES: dict[str, dict[str, Any]] = {
    "actr": {},
    "actr_one_recent": {"recent_traces": 1},
    "actr_scaled_gaps": {"gap_time_scale": 0.05, "decay": 0.3},
    "actr_exact": {"kind": "actr_exact"},
    "power": {"kind": "power", "power_time_unit_s": 30.0},
    "pavlik_anderson": {"kind": "pavlik_anderson"},  # no table: per-trace decays
    "exponential": {"kind": "exponential"},  # no table: no per-trace factor
}
SPECS: dict[str, dict[str, Any]] = {
    "learn_first_k": {"name": "learn_first_k", "params": {"k": 1}},
    "always_hotkey": {"name": "always_hotkey"},
    "rescorla_wagner": {"name": "rescorla_wagner"},
}


def _run(world: Any, spec: dict[str, Any], seeds: list[int]) -> tuple[UserSums, BatchSimulator]:
    agent = build_agent(spec, world)
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds)
    return agent.batch_policy(len(seeds), seeds).run(sim), sim  # type: ignore[attr-defined]


def _run_capturing(world: Any, spec: dict[str, Any], seeds: list[int],
                   monkeypatch: pytest.MonkeyPatch) -> tuple[UserSums, BatchSimulator, list[np.ndarray | None]]:
    """A fused run, with the decay-factor tables its loop was given."""
    made: list[np.ndarray | None] = []
    original = batch_loop.decay_factor_table

    def capture(sim: BatchSimulator) -> np.ndarray | None:
        table = original(sim)
        made.append(table)
        return table

    for module in ("frozen_policy", "learning.fused", "planned_choice_batch"):
        monkeypatch.setattr(f"shortcut_gym.agents.{module}.decay_factor_table", capture)
    sums, sim = _run(world, spec, seeds)
    monkeypatch.undo()
    return sums, sim, made


def _looped_sums(world_kwargs: dict[str, Any], spec: dict[str, Any], n_sess: int, n_cmd: int) -> UserSums:
    """Sums of the gymnasium env + agent stepped trial by trial (the plain kernel path)."""
    env = gym.make(ENV_ID, **world_kwargs)
    frames = [run_episode(env, agent_from_spec(spec), seed=s).assign(user=i) for i, s in enumerate(SEEDS)]
    df = pd.concat(frames, ignore_index=True)
    out = UserSums.zeros(len(SEEDS), n_sess, n_cmd)
    for r in df.itertuples():
        out.trials[r.user, r.session] += 1
        out.time_s[r.user, r.session] += r.duration_s
        out.outcomes[r.user, r.session, k.OUTCOME_NAMES.index(r.outcome)] += 1
        out.actions[r.user, r.session, k.ACTION_NAMES.index(r.action)] += 1
        out.command_time_s[r.user, r.command] += r.duration_s
        out.command_uses[r.user, r.command] += 1
    return out


@pytest.mark.parametrize("spec_name", list(SPECS))
@pytest.mark.parametrize("memory_name", list(MEMORIES))
def test_tabled_run_equals_plain_run_and_looped_env(memory_name: str, spec_name: str,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    memory, spec = MEMORIES[memory_name], SPECS[spec_name]
    world = make_world(schedule=SCHEDULE, memory=memory)
    tabled, tabled_sim, tables = _run_capturing(world, spec, SEEDS, monkeypatch)
    assert len(tables) == 1
    assert (tables[0] is not None) == k.tabulated_kind(int(tabled_sim.kernel_int_params[k.I_KIND]))
    assert (tables[0] is not None) == (memory_name not in ("pavlik_anderson", "exponential"))
    monkeypatch.setattr(batch_loop, "MIN_TABLE_USERS", 10**9)  # every loop on the plain path
    plain, plain_sim, none = _run_capturing(world, spec, SEEDS, monkeypatch)
    assert none == [None]
    for f in FIELDS:
        np.testing.assert_array_equal(getattr(tabled, f), getattr(plain, f), err_msg=f)
    for f in STATE:
        np.testing.assert_array_equal(getattr(tabled_sim, f), getattr(plain_sim, f), err_msg=f)
    looped = _looped_sums({"schedule": SCHEDULE, "memory": memory}, spec, tabled.trials.shape[1],
                          world.commands.n_commands)
    for f in FIELDS:
        np.testing.assert_array_equal(getattr(tabled, f), getattr(looped, f), err_msg=f)
    assert tabled.outcomes[:, :, k.OUT_HOTKEY].sum() > 0  # the hotkey path (the one tabled) ran


def test_tabled_run_with_warmup_traces_equals_looped_env() -> None:
    """Warm-up blocks lay traces off the schedule's clocks (trial -1): those are never tabled."""
    world = make_world(schedule=SCHEDULE, aids="warmup")
    spec = SPECS["learn_first_k"]
    tabled, _ = _run(world, spec, SEEDS)
    looped = _looped_sums({"schedule": SCHEDULE, "aids": "warmup"}, spec, tabled.trials.shape[1],
                          world.commands.n_commands)
    for f in FIELDS:
        np.testing.assert_array_equal(getattr(tabled, f), getattr(looped, f), err_msg=f)


@pytest.mark.parametrize("memory_name", ["actr", "actr_scaled_gaps", "actr_exact", "power"])
def test_table_entries_are_the_factor_of_their_clock_difference(memory_name: str,
                                                                monkeypatch: pytest.MonkeyPatch) -> None:
    """Each entry filled is age^-d (ACT-R) or (1 + age/u)^-d (power form) of age = clock[t] - clock[t'],
    computed here from the world's clocks in plain Python; nothing is filled at or above the diagonal."""
    memory = MEMORIES[memory_name]
    world = make_world(schedule=SCHEDULE, memory=memory)
    _, sim, tables = _run_capturing(world, SPECS["learn_first_k"], SEEDS, monkeypatch)
    table = tables[0]
    assert table is not None
    clock = np.asarray(sim.sched_clock[0])
    d = world.memory.decay
    filled = np.argwhere(table != k.FACTOR_UNSET)
    assert len(filled) > 100
    for t, tp in filled:
        assert tp < t
        age = float(clock[t]) - float(clock[tp])
        want = (1.0 + age / world.memory.power_time_unit_s) ** (-d) if world.memory.kind == "power" else age ** (-d)
        assert table[t, tp] == want, (t, tp)
        assert math.isclose(table[t, tp], math.exp(-d * math.log1p(age / world.memory.power_time_unit_s))
                            if world.memory.kind == "power" else math.exp(-d * math.log(age)), rel_tol=1e-12)


def test_no_table_for_replayed_schedules_few_users_or_long_horizons(monkeypatch: pytest.MonkeyPatch) -> None:
    world = make_world(schedule=SCHEDULE)
    sim = BatchSimulator(world)
    sim.reset(seeds=SEEDS)
    assert batch_loop.decay_factor_table(sim) is not None
    sim.reset(seeds=SEEDS[: batch_loop.MIN_TABLE_USERS - 1])
    assert batch_loop.decay_factor_table(sim) is None
    sim.reset(seeds=SEEDS, schedules=[sim.world.draw(np.random.default_rng(0))[0]] + [None] * (len(SEEDS) - 1))
    assert batch_loop.decay_factor_table(sim) is None  # users with their own clocks
    monkeypatch.setattr(batch_loop, "MAX_TABLE_TRIALS", world.horizon - 1)
    sim.reset(seeds=SEEDS)
    assert batch_loop.decay_factor_table(sim) is None


def test_activation_at_trial_equals_activation_on_random_states() -> None:
    """Random trace histories on a clock row (some traces off the schedule, trial -1), every kind
    the table serves: the tabled activation equals the plain one at every later trial, and a second
    read (from the filled table) too."""
    rng = np.random.default_rng(5)
    clock = np.cumsum(rng.uniform(1.0, 4000.0, 300))
    for kind, memory in (("actr", {"recent_traces": 2}), ("actr_exact", {}), ("power", {"power_time_unit_s": 5.0})):
        world = make_world(memory={"kind": kind, **memory})
        par, ipar = world.parameters()
        for _ in range(20):
            fs = np.zeros(k.N_FS)
            ist = np.zeros(k.N_IS, dtype=np.int64)
            tr = np.zeros((len(clock), k.N_TRACE))
            laid = np.sort(rng.choice(len(clock) - 50, size=int(rng.integers(1, 12)), replace=False))
            for t in laid:
                off_schedule = rng.random() < 0.2
                now = clock[t] - 0.5 if off_schedule else clock[t]
                k.add_trace(ipar, par, fs, ist, tr, now, float(rng.choice([0.5, 1.0, 2.0])), -1 if off_schedule else t)
            table = np.full((len(clock), len(clock)), k.FACTOR_UNSET)
            for t in range(int(laid[-1]) + 1, len(clock)):
                plain = k.activation(ipar, par, fs, ist, tr, clock[t])
                assert k.activation_at_trial(ipar, par, fs, ist, tr, clock[t], t, table) == plain
                assert k.activation_at_trial(ipar, par, fs, ist, tr, clock[t], t, table) == plain
