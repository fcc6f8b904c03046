"""The batched rollout reproduces looped gymnasium.make env + agent trial tables bit for bit."""

from __future__ import annotations

from typing import Any

import gymnasium as gym
import numpy as np
import pandas as pd
import pytest

import shortcut_gym.envs  # noqa: F401 - registers the env
from shortcut_gym.agents.base import Agent, ParamSpec
from shortcut_gym.agents.learning import MECHANISMS
from shortcut_gym.agents.registry import AGENTS, agent_from_spec
from shortcut_gym.agents.rollout import run_episode
from shortcut_gym.envs import ENV_ID, make_world
from shortcut_gym.envs.kernel import HOTKEY, LEARN
from shortcut_gym.lab.simulate import label_of
from shortcut_gym.lab.sweep.batch import simulate_users, trial_table

SCHEDULE = {"sessions": 3, "trials_per_session": 15, "gap_h": 20.0}
SEEDS = [3, 7, 11, 2024]
SPECS = [
    {"name": "always_menu"},
    {"name": "always_hotkey"},
    {"name": "learn_first_k", "params": {"k": 2}},
    {"name": "random", "params": {"p_hotkey": 0.4, "p_learn": 0.2}},
    {"name": "rescorla_wagner"},
    {"name": "rw_choice_kernel"},
    {"name": "composed_learner", "mechanisms": list(MECHANISMS)},
    {"name": "bounded_optimal", "n_bins": 12},
]


def _looped(spec: dict[str, Any], memory: str | None = None) -> pd.DataFrame:
    env = gym.make(ENV_ID, schedule=SCHEDULE, memory=memory)
    frames = []
    for user, seed in enumerate(SEEDS):
        agent = agent_from_spec(spec)
        df = run_episode(env, agent, seed=seed)
        df.insert(0, "seed", seed)
        df.insert(0, "user", user)
        df.insert(0, "agent", label_of(agent.spec()))
        frames.append(df)
    return pd.concat(frames, ignore_index=True)


# the planner supports no spacing-sensitive memory, so it runs on the default memory only
CASES = [(s, m) for m in (None, "spacing") for s in SPECS if not (m == "spacing" and s["name"] == "bounded_optimal")]


@pytest.mark.parametrize(("spec", "memory"), CASES, ids=[f"{s['name']}-{m}" for s, m in CASES])
def test_batched_trial_table_equals_looped_env(spec: dict[str, Any], memory: str | None) -> None:
    world = make_world(schedule=SCHEDULE, memory=memory)
    ref = _looped(spec, memory)
    sums = simulate_users(world, spec, SEEDS, record="trials")
    mine = trial_table(world, sums, label_of(agent_from_spec(spec).spec()))
    pd.testing.assert_frame_equal(mine, ref, check_exact=True)
    # the per-session sums agree with the table
    per = ref.groupby(["user", "session"], sort=True)["duration_s"].sum().to_numpy().reshape(len(SEEDS), -1)
    np.testing.assert_allclose(sums.time_s, per, rtol=1e-12)
    hot = (ref["outcome"] == "hotkey").groupby([ref["user"], ref["session"]]).sum().to_numpy()
    np.testing.assert_array_equal(sums.outcomes[:, :, 1].ravel(), hot)


class _CountingLearner(Agent):
    """Test agent: learn on the first k uses, then hotkey; offers a numpy batch policy."""

    name = "_test_counting_learner"
    batch_calls = 0

    def param_specs(self) -> dict[str, ParamSpec]:
        return {"k": ParamSpec("k", 1.0, 0.0, 10.0)}

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        self.uses: dict[int, int] = {}

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        p = np.zeros(3)
        p[LEARN if self.uses.get(int(info["target"]), 0) < self.params["k"] else HOTKEY] = 1.0
        return p

    def observe(self, transition: Any) -> None:
        c = int(transition.info["command"])
        self.uses[c] = self.uses.get(c, 0) + 1

    def batch_policy(self, n_users: int, seeds: list[int]) -> Any:
        k = self.params["k"]
        n_cmd = self.context.n_commands
        type(self).batch_calls += 1

        class Policy:
            uses = np.zeros((n_users, n_cmd), dtype=np.int64)

            def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
                return np.where(self.uses[np.arange(n_users), targets] < k, LEARN, HOTKEY)

            def observe(self, targets, actions, outcomes, durations_s) -> None:
                self.uses[np.arange(n_users), targets] += 1

        return Policy()


def test_batch_policy_path_equals_per_user_path(monkeypatch) -> None:
    monkeypatch.setitem(AGENTS, _CountingLearner.name, _CountingLearner)  # registered for this test only
    world = make_world(schedule=SCHEDULE)
    spec = {"name": _CountingLearner.name, "params": {"k": 2}}
    batched = simulate_users(world, spec, SEEDS, record="trials", use_batch_policy=True)
    assert _CountingLearner.batch_calls == 1
    looped = simulate_users(world, spec, SEEDS, record="trials", use_batch_policy=False)
    pd.testing.assert_frame_equal(trial_table(world, batched, "x"), trial_table(world, looped, "x"), check_exact=True)
    assert (trial_table(world, batched, "x")["action"] == "learn").sum() > 0


def test_chunked_batches_equal_one_batch() -> None:
    world = make_world(schedule=SCHEDULE)
    seeds = list(range(9))
    for spec in ({"name": "composed_learner", "mechanisms": list(MECHANISMS)}, {"name": "random"}):
        whole = simulate_users(world, spec, seeds)
        chunked = simulate_users(world, spec, seeds, chunk_users=4)
        for f in ("trials", "time_s", "outcomes", "actions", "command_time_s", "command_uses"):
            np.testing.assert_array_equal(getattr(chunked, f), getattr(whole, f), err_msg=f)
        assert whole.outcomes[:, :, 1].sum() > 0


class _Recorder(Agent):
    """Test agent: always menu; records every obs and info it is given (class-level log)."""

    name = "_test_recorder"
    log: list[Any] = []

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        type(self).log.append(("act", obs.tolist(), dict(info)))
        return np.array([0.2, 0.5, 0.3])

    def observe(self, transition: Any) -> None:
        t = transition
        type(self).log.append(("observe", t.obs.tolist(), t.action, t.reward, t.next_obs.tolist(), dict(t.info),
                               t.terminated, t.truncated))


def test_per_user_agents_see_exactly_what_the_env_gives(monkeypatch) -> None:
    monkeypatch.setitem(AGENTS, _Recorder.name, _Recorder)  # registered for this test only
    _Recorder.log = []
    env = gym.make(ENV_ID, schedule=SCHEDULE)
    run_episode(env, agent_from_spec({"name": _Recorder.name}), seed=5)
    ref = list(_Recorder.log)
    _Recorder.log = []
    simulate_users(make_world(schedule=SCHEDULE), {"name": _Recorder.name}, [5])
    assert len(_Recorder.log) == len(ref) == 2 * 45
    assert _Recorder.log == ref  # same keys and values, in the same order of calls
