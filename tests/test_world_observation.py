"""The observation layout has one owner: the kernel, the world, the env and the log rebuild agree."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.envs import CommandSelectionEnv, make_world
from shortcut_gym.envs.observation import (
    FEATURES,
    LOG_FEATURE_HIGH,
    RECALL_FEATURE,
    ObservationLayout,
    feature_index,
    layout_of_length,
)
from shortcut_gym.lab.fitting.replay import _observations

SCHEDULE = {"sessions": 3, "trials_per_session": 20}


def _episode(env: CommandSelectionEnv, seed: int) -> tuple[list[np.ndarray], list[dict]]:
    """Observations before every trial and the step infos of one episode with varied actions."""
    rng = np.random.default_rng(seed)
    obs, info = env.reset(seed=seed)
    seen, infos = [obs], []
    done = False
    while not done:
        obs, _, term, trunc, info = env.step(int(rng.integers(0, 3)))
        infos.append(info)
        seen.append(obs)
        done = term or trunc
    return seen[:-1], infos


@pytest.mark.parametrize("encoding", ["onehot", "index"])
@pytest.mark.parametrize("recall", [False, True])
def test_kernel_writes_each_feature_where_the_layout_says(encoding: str, recall: bool) -> None:
    env = CommandSelectionEnv(schedule=SCHEDULE, target_encoding=encoding, observe_recall=recall)
    world = env.world
    layout = world.observation_layout()
    assert layout == ObservationLayout(world.commands.n_commands, encoding == "onehot", recall)
    assert env.observation_space.shape == (layout.dim,) == (world.obs_dim,)
    assert world.observation_names() == layout.names(world.commands.names)
    assert len(layout.names()) == layout.dim
    observations, infos = _episode(env, seed=3)
    uses: dict[int, int] = {}
    ok: dict[int, int] = {}
    last: dict[int, float] = {}
    hand = 0.0
    n = world.horizon
    for t, (obs, info) in enumerate(zip(observations, infos, strict=True)):
        c = info["command"]
        assert env.observation_space.contains(obs)
        if encoding == "onehot":
            assert obs[c] == 1.0 and obs[: layout.target_size].sum() == 1.0
        else:
            assert obs[0] == pytest.approx(c / (world.commands.n_commands - 1))
        assert obs[layout.index("log1p_exposures")] == np.float32(math.log1p(uses.get(c, 0)))
        assert obs[layout.index("log1p_hotkey_successes")] == np.float32(math.log1p(ok.get(c, 0)))
        since = math.log1p(info["onset_s"] - last[c]) if c in last else 0.0
        assert obs[layout.index("log1p_seconds_since_last_use")] == np.float32(since)
        assert obs[layout.index("hand_on_keyboard")] == hand
        assert obs[layout.index("horizon_left_fraction")] == np.float32((n - t) / n)
        if recall:
            assert obs[layout.index(RECALL_FEATURE)] == np.float32(info["p_recall"])
        uses[c] = uses.get(c, 0) + 1
        ok[c] = ok.get(c, 0) + (info["outcome"] == "hotkey")
        last[c] = info["onset_s"]
        hand = 1.0 if info["outcome"] == "hotkey" else 0.0


def test_bounds_are_one_for_unit_features_and_the_log_bound_elsewhere() -> None:
    layout = ObservationLayout(4, onehot=True, observe_recall=True)
    high = layout.high()
    assert high.dtype == np.float32 and high.shape == (layout.dim,)
    assert (high[:4] == 1.0).all()
    expect = {"hand_on_keyboard": 1.0, "horizon_left_fraction": 1.0, RECALL_FEATURE: 1.0}
    for name in layout.feature_names():
        assert high[layout.index(name)] == expect.get(name, LOG_FEATURE_HIGH), name
    assert (layout.space().low == 0.0).all()


def test_log_rebuild_equals_the_env_observations() -> None:
    """The lab's Python rebuild of observations from a log equals what the env showed."""
    env = CommandSelectionEnv(schedule=SCHEDULE)
    observations, infos = _episode(env, seed=11)
    import pandas as pd

    log = pd.DataFrame({"command": [i["command"] for i in infos], "onset_s": [i["onset_s"] for i in infos],
                        "outcome": [i["outcome"] for i in infos]})
    rebuilt = _observations(log, env.world.commands.n_commands)
    np.testing.assert_array_equal(rebuilt, np.stack(observations))


def test_layout_of_length_finds_the_one_layout_or_says_it_cannot() -> None:
    for n in (1, 3, 8):
        for onehot in (True, False):
            for recall in (False, True):
                layout = ObservationLayout(n, onehot, recall)
                for feature in FEATURES:
                    assert feature_index(feature, layout.dim, n) == layout.index(feature)
    # two commands: one-hot without recall and index with recall both have 9 entries
    assert ObservationLayout(2, True, False).dim == ObservationLayout(2, False, True).dim == 9
    with pytest.raises(ValueError, match="cannot tell the observation layout of 9 entries for 2 commands"):
        layout_of_length(2, 9)
    with pytest.raises(ValueError, match="cannot tell"):
        layout_of_length(3, 40)
    names = make_world(observe_recall=True).observation_names()
    assert feature_index(RECALL_FEATURE, len(names), 1, names) == len(names) - 1
    with pytest.raises(ValueError, match="entries, the names given are"):
        feature_index(RECALL_FEATURE, len(names) + 1, 1, names)
    with pytest.raises(ValueError, match="'nope' is not in this layout"):
        ObservationLayout(3).index("nope")


class _Recorder:
    """Wraps an env, keeping every observation it returns (reset and steps)."""

    def __init__(self, env: CommandSelectionEnv) -> None:
        self.env, self.seen = env, []
        self.unwrapped = env

    def __getattr__(self, name: str):
        return getattr(self.env, name)

    def reset(self, **kw):
        obs, info = self.env.reset(**kw)
        self.seen.append(obs)
        return obs, info

    def step(self, action):
        out = self.env.step(action)
        self.seen.append(out[0])
        return out


@pytest.mark.parametrize("agent", ["random", "learn_first_k:k=1", "always_hotkey"])
def test_time_since_last_use_rebuilt_from_a_written_log_is_the_env_feature_bit_for_bit(tmp_path, agent) -> None:
    """Through a log file (written, read back, validated), several users and overnight gaps: the
    rebuild's log1p_seconds_since_last_use equals the one the env showed, bit for bit."""
    from shortcut_gym.agents import make_agent, run_episode
    from shortcut_gym.lab.cli.options import parse_agent_arg
    from shortcut_gym.lab.data.logs import log_from_simulation, participant_trials, read_log, write_log

    world = make_world(schedule={"sessions": 4, "trials_per_session": 25, "gap_h": 16.0})
    spec = parse_agent_arg(agent)
    shown, frames = {}, []
    for user in range(3):
        env = _Recorder(CommandSelectionEnv(world=world))
        frames.append(run_episode(env, make_agent(spec["name"], **spec.get("options", {}),
                                                  **spec.get("params", {})), seed=user).assign(user=user))
        shown[user] = np.stack(env.seen[:-1])  # the observation before each trial
    log = log_from_simulation(pd.concat(frames, ignore_index=True), world.commands)
    log = read_log(write_log(log, tmp_path / "log.csv"), world.commands)
    at = ObservationLayout(world.commands.n_commands).index("log1p_seconds_since_last_use")
    participants = list(pd.unique(log["participant"]))
    assert len(participants) == 3
    for user, pid in enumerate(participants):
        rebuilt = _observations(participant_trials(log, pid), world.commands.n_commands)[:, at]
        expect = shown[user][:, at]
        assert rebuilt.dtype == expect.dtype == np.float32
        np.testing.assert_array_equal(rebuilt.view(np.uint32), expect.view(np.uint32))
        assert (expect > math.log1p(15 * 3600.0)).sum() >= 1  # an overnight gap is among the values compared
        assert (expect == 0.0).sum() >= 1  # and a first use
