"""``train --out`` is used as given: a suffix that does not fit the agent and an existing file
(without ``--overwrite``) are refused in one line before any training."""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents.sb3 import SB3Agent
from shortcut_gym.agents.tabular import TabularAgent
from shortcut_gym.lab.cli import main

ONE = ["--sessions", "1", "--eval-users", "0", "--quiet"]
SUFFIX = {"q_learning": ".npz", "sarsa": ".npz", "ppo": ".zip", "a2c": ".zip", "dqn": ".zip"}


class Trained(Exception):
    """Raised by the tripwire in place of training: the command got past its checks."""


@pytest.fixture
def tripwire(monkeypatch) -> list[str]:
    """Training replaced by a tripwire that records the call and stops the command."""
    calls: list[str] = []

    def trip(self, *args, **kwargs):
        calls.append(self.name)
        raise Trained(self.name)

    monkeypatch.setattr(SB3Agent, "train", trip)
    monkeypatch.setattr(TabularAgent, "train", trip)
    return calls


def _refused(argv: list[str], capsys) -> str:
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err, err
    return err


@pytest.mark.parametrize("name", list(SUFFIX))
@pytest.mark.parametrize("given", ["m.zip", "m.npz", "m", "m.pt", "m.obs_norm.npz"])
def test_a_suffix_that_does_not_fit_the_agent_is_refused_naming_the_right_one(tmp_path, capsys, tripwire,
                                                                             name, given) -> None:
    out = tmp_path / given
    argv = ["train", "--agent", name, *ONE, "--out", str(out)]
    if out.suffix == SUFFIX[name]:
        with pytest.raises(Trained):
            main(argv)
        assert tripwire == [name]
        return
    err = _refused(argv, capsys)
    assert f"--out {out}: {name} writes" in err and f"must end in {SUFFIX[name]}" in err
    assert f"give --out {out.with_suffix(SUFFIX[name])}" in err
    assert tripwire == [] and list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(("name", "existing"), [
    ("q_learning", ["m.npz"]), ("sarsa", ["m.npz"]), ("ppo", ["m.zip"]), ("a2c", ["m.obs_norm.npz"]),
    ("dqn", ["m.zip", "m.obs_norm.npz"]),
])
def test_an_existing_model_is_refused_before_training_unless_overwrite(tmp_path, capsys, tripwire, name,
                                                                      existing) -> None:
    out = tmp_path / f"m{SUFFIX[name]}"
    for file in existing:
        (tmp_path / file).write_bytes(b"a model of hive 7")
    err = _refused(["train", "--agent", name, *ONE, "--out", str(out)], capsys)
    first = tmp_path / existing[0]
    assert f"{first}: the file exists; give --overwrite to replace it" in err
    assert ("observation statistics" in err) == first.name.endswith(".obs_norm.npz")
    assert tripwire == []
    assert all((tmp_path / f).read_bytes() == b"a model of hive 7" for f in existing)
    with pytest.raises(Trained):
        main(["train", "--agent", name, *ONE, "--out", str(out), "--overwrite"])
    assert tripwire == [name]


def test_without_normalize_the_statistics_file_is_not_claimed(tmp_path, tripwire) -> None:
    (tmp_path / "m.obs_norm.npz").write_bytes(b"stale")
    with pytest.raises(Trained):
        main(["train", "--agent", "ppo:normalize=false", *ONE, "--out", str(tmp_path / "m.zip")])
    assert tripwire == ["ppo"]


def test_a_second_training_replaces_the_model_only_with_overwrite(tmp_path, capsys) -> None:
    out = tmp_path / "q.npz"
    train = ["train", "--agent", "q_learning", *ONE, "--trials", "40", "--out", str(out)]
    assert main([*train, "--seed", "1"]) == 0
    with np.load(out) as d:
        first = d["q"].copy()
    capsys.readouterr()
    _refused([*train, "--seed", "2"], capsys)
    with np.load(out) as d:
        np.testing.assert_array_equal(d["q"], first)
    assert main(["-q", *train, "--seed", "2", "--overwrite"]) == 0
    with np.load(out) as d:
        assert not np.array_equal(d["q"], first)  # other training users: another table
    assert sorted(p.name for p in tmp_path.iterdir()) == ["q.npz"]
