"""render_mode='rgb_array': the board's marks against the state they picture; env checkers; RecordVideo."""

from __future__ import annotations

import sys
import types
import warnings

import gymnasium as gym
import numpy as np
import pytest

from shortcut_gym.envs import ENV_ID, CommandSelectionEnv
from shortcut_gym.envs import memory as Mem
from shortcut_gym.envs import render as R

ONE_SESSION = {"sessions": 1, "trials_per_session": 30, "trial_interval_s": 30.0}
TWO_SESSIONS = {"sessions": 2, "trials_per_session": 12}


def _rgb(hex_colour: str) -> np.ndarray:
    return np.array([int(hex_colour[i : i + 2], 16) for i in (1, 3, 5)])


def _matches(frame: np.ndarray, colour: str, tol: int = 6) -> np.ndarray:
    return np.abs(frame.astype(int) - _rgb(colour)).max(axis=-1) <= tol


def _bar_fill_px(frame: np.ndarray, row: R.BoardRow) -> int:
    """Width in pixels of the filled part of a row's recall bar, read off the frame."""
    bx, by, bw, bh = row.bar
    y = int(round(by + bh / 2))
    xs = np.arange(int(np.floor(bx)), int(np.ceil(bx + bw)))
    return int(_matches(frame[y, xs], R._BAR, tol=40).sum())


def test_frames_are_fixed_size_seeded_and_follow_the_trials() -> None:
    def frames(seed: int) -> list[np.ndarray]:
        env = CommandSelectionEnv(schedule=TWO_SESSIONS, render_mode="rgb_array")
        env.reset(seed=seed)
        out = [env.render()]
        for a in (2, 1, 0, 1):
            env.step(a)
            out.append(env.render())
        return out

    a, b, c = frames(4), frames(4), frames(5)
    for f in a:
        assert f.shape == (R.FRAME_H, R.FRAME_W, 3) and f.dtype == np.uint8
    for fa, fb in zip(a, b):
        np.testing.assert_array_equal(fa, fb)
    assert all(not np.array_equal(x, y) for x, y in zip(a, a[1:]))  # every trial changes the picture
    assert any(not np.array_equal(x, y) for x, y in zip(a, c))


def test_recall_bars_equal_the_actr_formula_for_every_command() -> None:
    """Exact ACT-R memory, one session: each command's bar (scene value and drawn length) is
    1 / (1 + exp(-(A - tau)/s)) with A = ln(sum_j w_j (t - t_j)^-d) over the traces the trials laid."""
    env = CommandSelectionEnv(schedule=ONE_SESSION, memory={"kind": "actr_exact"}, render_mode="rgb_array")
    _, info = env.reset(seed=11)
    mem = env.world.memory
    weight = {"learned": mem.weights.learn, "hotkey": mem.weights.hotkey_success,
              "hotkey_forgotten": mem.weights.hotkey_failure, "hotkey_wrong": mem.weights.hotkey_failure,
              "menu": mem.weights.menu}
    traces: dict[int, list[tuple[float, float]]] = {}
    learned: set[int] = set()
    painter = None
    checked = 0
    for _ in range(ONE_SESSION["trials_per_session"] - 1):
        c = info["target"]
        action = 1 if c in learned else 2
        learned.add(c)
        _, _, _, _, info = env.step(action)
        traces.setdefault(c, []).append((info["onset_s"], weight[info["outcome"]]))
        frame = env.render()
        painter = env._painter
        scene = R.scene_of(env._sim, info)
        now = info["next_onset_s"]
        for cmd in range(env.world.commands.n_commands):
            ts = [t for t, w in traces.get(cmd, []) if w > 0]
            ws = [w for t, w in traces.get(cmd, []) if w > 0]
            act = Mem.actr_activation(now, ts, mem.decay, ws)
            p = Mem.recall_probability(act, mem.threshold, mem.noise_s)
            assert scene.recall[cmd] == pytest.approx(p, abs=1e-12)
            row = painter.rows[cmd]
            assert abs(_bar_fill_px(frame, row) - p * row.bar[2]) <= 2.0
            checked += p > 0.05
    assert checked > 20  # bars with a visible length were among those checked


def test_hand_marker_last_trial_and_upcoming_target() -> None:
    env = CommandSelectionEnv(schedule=ONE_SESSION, memory={"kind": "actr_exact"}, render_mode="rgb_array")
    _, info = env.reset(seed=2)
    frame = env.render()
    painter = env._painter
    hand = lambda f, spot: _matches(f[int(spot[1]), int(spot[0])][None], R._CORAL)[0]  # noqa: E731
    assert hand(frame, painter.pointer_spot) and not hand(frame, painter.keyboard_spot)
    c = info["target"]
    _, _, _, _, info = env.step(2)  # learn: menu path, hand stays on the pointer
    while info["target"] != c:
        _, _, _, _, info = env.step(0)
    _, _, _, _, info = env.step(1)
    frame = env.render()
    on_keyboard = info["outcome"] == "hotkey"
    assert hand(frame, painter.keyboard_spot) == on_keyboard
    assert hand(frame, painter.pointer_spot) != on_keyboard
    # the last trial's row is tinted in its outcome's colour, every other row keeps the panel colour
    tint = 0.18 * _rgb(R._OUTCOME_COLOURS[info["outcome"]]) + 0.82 * _rgb(R._PANEL)
    for cmd, row in painter.rows.items():
        y = int(row.y + row.height * 0.5)  # between the name and the bar; a median over a strip
        strip = frame[y, int(row.x0 + row.width * 0.4) : int(row.x0 + row.width * 0.6)]  # is robust to a path
        expected = tint if cmd == c else _rgb(R._PANEL)
        assert np.abs(np.median(strip, axis=0) - expected).max() <= 3, cmd
    # the dashed coral outline surrounds the upcoming target's row and no other row
    coral = _matches(frame, R._CORAL, tol=30)
    counts = {}
    for cmd, row in painter.rows.items():
        y0, y1 = int(row.y + 1), int(row.y + row.height - 1)
        x0, x1 = int(row.x0 + 2), int(row.x0 + row.width - 2)
        counts[cmd] = int(coral[y0:y1, x0 : x0 + 4].sum() + coral[y0:y1, x1 - 4 : x1].sum())
    assert max(counts, key=counts.get) == info["target"]
    assert sorted(counts.values())[-2] == 0


def test_rgb_array_needs_a_reset_and_other_modes_are_refused() -> None:
    env = CommandSelectionEnv(schedule=TWO_SESSIONS, render_mode="rgb_array")
    with pytest.raises(RuntimeError, match="reset"):
        env.render()
    with pytest.raises(ValueError, match="render_mode must be one of"):
        CommandSelectionEnv(schedule=TWO_SESSIONS, render_mode="rgb_array_list")
    assert CommandSelectionEnv(schedule=TWO_SESSIONS).render() is None


def test_last_frame_after_the_horizon() -> None:
    env = CommandSelectionEnv(schedule=TWO_SESSIONS, render_mode="rgb_array")
    env.reset(seed=0)
    for _ in range(env.world.horizon):
        env.step(2)
    scene = R.scene_of(env._sim, env._last)
    assert scene.upcoming is None and scene.trials_done == env.world.horizon
    seen = np.zeros(env.world.commands.n_commands, dtype=bool)
    seen[env.schedule.command] = True
    assert (scene.recall[seen] > 0).all() and (scene.recall[seen] < 1).all()  # the last trace has a positive age
    assert (scene.recall[~seen] == 0).all()
    assert env.render().shape == (R.FRAME_H, R.FRAME_W, 3)


@pytest.mark.parametrize("mode", [None, "ansi", "rgb_array"])
def test_gymnasium_and_sb3_env_checkers_pass_in_every_render_mode(mode) -> None:
    from gymnasium.utils.env_checker import check_env as gym_check
    from stable_baselines3.common.env_checker import check_env as sb3_check

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        gym_check(gym.make(ENV_ID, schedule=TWO_SESSIONS, render_mode=mode).unwrapped)
        sb3_check(gym.make(ENV_ID, schedule=TWO_SESSIONS, render_mode=mode), warn=True)
    ours = [str(w.message) for w in caught if "pkg_resources" not in str(w.message)]
    assert ours == []


class _FrameSink:
    """Stands in for moviepy's ImageSequenceClip: keeps the frames RecordVideo hands the encoder."""

    written: list[tuple[str, list[np.ndarray], float]] = []

    def __init__(self, frames: list[np.ndarray], fps: float) -> None:
        self.frames, self.fps = list(frames), fps

    def write_videofile(self, path: str, logger=None) -> None:
        _FrameSink.written.append((path, self.frames, self.fps))


def _stub_encoder(monkeypatch) -> None:
    mods = {name: types.ModuleType(name) for name in
            ("moviepy", "moviepy.video", "moviepy.video.io", "moviepy.video.io.ImageSequenceClip")}
    mods["moviepy.video.io.ImageSequenceClip"].ImageSequenceClip = _FrameSink
    for name, mod in mods.items():
        monkeypatch.setitem(sys.modules, name, mod)


def test_record_video_gets_one_frame_per_trial_plus_the_reset(monkeypatch, tmp_path) -> None:
    """Gymnasium's own RecordVideo over the env; the encoder is replaced by a frame sink."""
    from gymnasium.wrappers import RecordVideo

    _stub_encoder(monkeypatch)
    _FrameSink.written.clear()
    schedule = {"sessions": 1, "trials_per_session": 6}
    env = RecordVideo(gym.make(ENV_ID, schedule=schedule, render_mode="rgb_array"), str(tmp_path / "video"),
                      episode_trigger=lambda e: e == 0)
    env.reset(seed=3)
    direct = CommandSelectionEnv(schedule=schedule, render_mode="rgb_array")
    direct.reset(seed=3)
    expected = [direct.render()]
    done = False
    while not done:
        _, _, term, trunc, _ = env.step(0)
        direct.step(0)
        expected.append(direct.render())
        done = term or trunc
    env.close()
    (path, frames, fps), = _FrameSink.written
    assert path.endswith("rl-video-episode-0.mp4") and fps == CommandSelectionEnv.metadata["render_fps"]
    assert len(frames) == schedule["trials_per_session"] + 1
    for got, want in zip(frames, expected):
        np.testing.assert_array_equal(got, want)


def test_record_video_writes_a_real_file_when_moviepy_is_installed(tmp_path) -> None:
    pytest.importorskip("moviepy", reason="the video encoder is optional (extra 'video')")
    from gymnasium.wrappers import RecordVideo

    env = RecordVideo(gym.make(ENV_ID, schedule={"sessions": 1, "trials_per_session": 4}, render_mode="rgb_array"),
                      str(tmp_path), episode_trigger=lambda e: e == 0)
    env.reset(seed=0)
    for _ in range(4):
        env.step(0)
    env.close()
    (video,) = tmp_path.glob("*.mp4")
    assert video.stat().st_size > 1000
