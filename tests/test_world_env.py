"""CommandSelection-v0: time accounting against costs.py, info, determinism, actions, render."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from shortcut_gym.envs import ENV_ID, ActionError, CommandSelectionEnv, Schedule
from shortcut_gym.envs import costs as C
from shortcut_gym.envs import memory as Mem

SHORT = {"sessions": 2, "trials_per_session": 15}


def _env(**kw) -> CommandSelectionEnv:
    return CommandSelectionEnv(schedule=kw.pop("schedule", SHORT), **kw)


def test_first_menu_selection_time_equals_cost_model() -> None:
    env = _env()
    _, info = env.reset(seed=3)
    c = info["target"]
    cs, costs = env.world.commands, env.world.costs
    _, reward, _, _, step = env.step(0)
    expected = C.menu_time_s(costs, int(cs.menu_size[c]), int(cs.item_index[c]),
                             float(cs.within_menu_probability[c]), 1, hand_on_keyboard=False)
    assert -reward == pytest.approx(expected)
    assert step["outcome"] == "menu" and step["command"] == c
    assert sum(step["time_s"].values()) == pytest.approx(-reward)


def test_learn_costs_menu_plus_encoding_then_hotkey_pays_recall_latency() -> None:
    env = _env(schedule={"sessions": 1, "trials_per_session": 30, "trial_interval_s": 30.0})
    _, info = env.reset(seed=5)
    cs, costs, mem = env.world.commands, env.world.costs, env.world.memory
    target = info["target"]
    _, r, *_ , step = env.step(2)
    menu = C.menu_time_s(costs, int(cs.menu_size[target]), int(cs.item_index[target]),
                         float(cs.within_menu_probability[target]), 1, False)
    assert -r == pytest.approx(menu + costs.learn.encoding_s)
    assert step["outcome"] == "learned"
    learned_at = step["onset_s"]
    info = step
    while info["target"] != target:
        _, _, _, _, info = env.step(0)
    _, r, *_ , step = env.step(1)
    act = Mem.actr_activation(step["onset_s"], [learned_at], mem.decay, [mem.weights.learn])
    assert step["p_recall"] == pytest.approx(Mem.recall_probability(act, mem.threshold, mem.noise_s))
    if step["outcome"] == "hotkey":
        # hand was on the mouse after the menu trials, so H is paid
        expected = C.hotkey_time_s(costs, int(cs.keystrokes[target]), False,
                                   Mem.retrieval_latency_s(act, mem.latency_factor_s))
        assert -r == pytest.approx(expected)
        assert step["time_s"]["H"] == pytest.approx(costs.klm.home_s)
    else:
        assert step["outcome"] in ("hotkey_forgotten", "hotkey_wrong")
        assert step["time_s"]["retrieval"] == pytest.approx(mem.latency_factor_s * np.exp(-mem.threshold))


def test_failed_recall_costs_attempt_then_menu() -> None:
    env = _env()
    _, info = env.reset(seed=1)
    c = info["target"]
    cs, costs, mem = env.world.commands, env.world.costs, env.world.memory
    _, r, *_, step = env.step(1)  # never learned: recall probability 0
    assert step["p_recall"] == 0.0
    attempt = costs.klm.mental_s + costs.klm.home_s + mem.latency_factor_s * np.exp(-mem.threshold)
    menu = C.menu_time_s(costs, int(cs.menu_size[c]), int(cs.item_index[c]),
                         float(cs.within_menu_probability[c]), 1, hand_on_keyboard=True, include_mental=False)
    if step["outcome"] == "hotkey_forgotten":
        assert -r == pytest.approx(attempt + menu)
    else:
        assert step["outcome"] == "hotkey_wrong"
        keys = int(cs.keystrokes[c]) * costs.klm.k_s
        undo = costs.klm.mental_s + costs.errors.undo_keystrokes * costs.klm.k_s
        assert -r == pytest.approx(attempt + keys + undo + menu)


def test_commission_share_splits_failures() -> None:
    env = _env(costs={"errors": {"commission_share": 1.0}})
    env.reset(seed=0)
    _, _, _, _, step = env.step(1)
    assert step["outcome"] == "hotkey_wrong"
    env = _env(costs={"errors": {"commission_share": 0.0}})
    env.reset(seed=0)
    _, _, _, _, step = env.step(1)
    assert step["outcome"] == "hotkey_forgotten"


def test_terminated_at_the_schedules_end_never_truncated_and_step_after_end_raises() -> None:
    env = _env()
    env.reset(seed=0)
    n = env.world.horizon
    steps = [env.step(0) for _ in range(n)]
    assert [s[2] for s in steps] == [False] * (n - 1) + [True]  # the horizon is observed: a true end
    assert not any(s[3] for s in steps)  # truncation is left to wrappers
    assert steps[-1][0][env.world.observation_names().index("horizon_left_fraction")] == 0.0
    with pytest.raises(RuntimeError, match="horizon of 30 trials"):
        env.step(0)


@pytest.mark.parametrize("limit", [1, 7, 29, 30, 31, 100])
def test_only_a_time_limit_wrapper_truncates(limit: int) -> None:
    import gymnasium as gym

    from shortcut_gym import ENV_ID

    env = gym.make(ENV_ID, max_episode_steps=limit)
    env.reset(seed=3)
    horizon = env.unwrapped.world.horizon
    flags = []
    done = False
    while not done:
        _, _, terminated, truncated, _ = env.step(0)
        flags.append((terminated, truncated))
        done = terminated or truncated
    steps = min(limit, horizon)
    assert len(flags) == steps
    assert all(f == (False, False) for f in flags[:-1])
    # at the schedule's end the episode terminates (TimeLimit also flags a limit reached on that step)
    assert flags[-1] == (steps == horizon, limit <= horizon)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), actions=st.lists(st.integers(0, 2), min_size=30, max_size=30))
def test_same_seed_same_trajectory(seed: int, actions: list[int]) -> None:
    def run() -> list[tuple]:
        env = _env(observe_recall=True)
        obs, _ = env.reset(seed=seed)
        out = [tuple(obs)]
        for a in actions:
            obs, r, _, _, info = env.step(a)
            out.append((tuple(obs), r, info["outcome"], info["command"]))
        return out

    assert run() == run()


def test_different_seeds_give_different_schedules() -> None:
    env = _env()
    env.reset(seed=1)
    a = env.schedule.command.copy()
    env.reset(seed=2)
    assert not np.array_equal(a, env.schedule.command)


@pytest.mark.parametrize("bad", [3, -1, 1.5, "menu", None, [0]])
def test_invalid_actions_raise_clear_errors(bad) -> None:
    env = _env()
    env.reset(seed=0)
    with pytest.raises(ActionError, match=r"action must be 0 \(menu\), 1 \(hotkey\) or 2 \(learn\), got"):
        env.step(bad)


def test_numpy_integer_actions_are_accepted() -> None:
    env = _env()
    env.reset(seed=0)
    assert env.step(np.int64(0))[4]["action"] == 0


def test_step_before_reset_raises() -> None:
    with pytest.raises(RuntimeError, match="reset"):
        _env().step(0)


def test_observation_layout_and_recall_exposure() -> None:
    env = _env(observe_recall=True)
    obs, info = env.reset(seed=4)
    names = env.world.observation_names()
    assert len(names) == obs.shape[0] == env.observation_space.shape[0]
    assert obs[info["target"]] == 1.0 and obs[: env.world.commands.n_commands].sum() == 1.0
    assert names[-1] == "recall_probability" and obs[-1] == 0.0
    assert obs[names.index("horizon_left_fraction")] == 1.0
    hidden = _env(observe_recall=False)
    assert hidden.observation_space.shape[0] == obs.shape[0] - 1


def test_replayed_schedule_sets_targets() -> None:
    env = _env()
    n = 30
    sched = Schedule(np.arange(n, dtype=np.int64) % 3, np.arange(n) * 60.0, np.zeros(n, dtype=np.int64), np.zeros(n))
    _, info = env.reset(seed=0, options={"schedule": sched})
    seen = [info["target"]]
    for _ in range(n - 1):
        seen.append(env.step(0)[4]["target"])
    assert seen == (np.arange(n) % 3).tolist()
    with pytest.raises(ValueError, match=r"unknown reset option\(s\) \['replay'\]"):
        env.reset(options={"replay": sched})


def test_render_ansi_one_line_summary() -> None:
    env = _env(render_mode="ansi")
    env.reset(seed=0)
    assert env.render().startswith("trial 0/30: next ")
    env.step(0)
    line = env.render()
    assert "\n" not in line and line.startswith("trial 1/30 session 1: ") and "menu -> menu" in line
    with pytest.raises(ValueError, match="render_mode must be one of"):
        _env(render_mode="human")


def test_registered_id_makes_the_env() -> None:
    env = gym.make(ENV_ID, schedule=SHORT, observe_recall=True)
    assert isinstance(env.unwrapped, CommandSelectionEnv)
    assert env.unwrapped.world.observe_recall


def test_info_describes_the_upcoming_trial_separately() -> None:
    env = _env()
    _, info = env.reset(seed=2)
    sched = env.schedule
    assert (info["next_trial"], info["next_onset_s"], info["next_session"]) == (0, sched.onset_s[0], 0)
    for t in range(1, 20):
        step = env.step(0)[4]
        assert step["trial"] == t - 1 and step["onset_s"] == sched.onset_s[t - 1]
        assert step["next_trial"] == t and step["next_onset_s"] == sched.onset_s[t]
        assert step["target"] == sched.command[t] and step["next_session"] == sched.session[t]
