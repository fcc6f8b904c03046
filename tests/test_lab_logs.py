"""Trial-log validation: every fault named with file, row and column; round trips; replay."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents.base import AgentContext
from shortcut_gym.agents.learning import MECHANISMS
from shortcut_gym.agents.registry import make_agent
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import (
    LogError,
    participant_trials,
    read_log,
    schedule_of,
    validate_log,
    write_log,
)
from shortcut_gym.lab.fitting import ModelSpec, loglik_function, replay_probabilities

WORLD = make_world()


@pytest.fixture(scope="module")
def good_log() -> pd.DataFrame:
    return simulate_log(WORLD, ModelSpec("random"), 2, np.random.default_rng(0), prefix="P")


def _fault(log: pd.DataFrame, source: str = "log.csv") -> str:
    with pytest.raises(LogError) as err:
        validate_log(log, WORLD.commands, source=source)
    return str(err.value)


def test_good_log_validates_and_keeps_every_row(good_log):
    v = validate_log(good_log, WORLD.commands)
    assert len(v) == len(good_log)
    assert (v["command_index"].map(lambda i: WORLD.commands.names[i]) == good_log["command"]).all()


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_round_trip(good_log, tmp_path, suffix):
    path = write_log(good_log, tmp_path / f"log{suffix}")
    back = read_log(path, WORLD.commands)
    pd.testing.assert_frame_equal(back[list(good_log.columns)].reset_index(drop=True),
                                  good_log.astype({"participant": str}).reset_index(drop=True), check_dtype=False)


def test_missing_column(good_log):
    msg = _fault(good_log.drop(columns=["outcome"]))
    assert "log.csv, column 'outcome': required column is missing" in msg


def test_unknown_command(good_log):
    bad = good_log.copy()
    bad.loc[4, "command"] = "Feed the crabs"
    assert "log.csv, row 5, column 'command': unknown command 'Feed the crabs'" in _fault(bad)


def test_unknown_action(good_log):
    bad = good_log.copy()
    bad.loc[2, "action"] = "voice"
    assert "row 3, column 'action': unknown action 'voice'" in _fault(bad)


def test_unknown_outcome(good_log):
    bad = good_log.copy()
    bad.loc[2, "outcome"] = "crashed"
    assert "row 3, column 'outcome': unknown outcome 'crashed'" in _fault(bad)


def test_action_outcome_mismatch(good_log):
    bad = good_log.copy()
    bad.loc[6, ["action", "outcome"]] = ["menu", "hotkey"]
    assert "row 7, column 'outcome': outcome 'hotkey' cannot follow action 'menu'" in _fault(bad)


@pytest.mark.parametrize("column", ["onset_s", "duration_s", "session", "command", "participant"])
def test_nan(good_log, column):
    bad = good_log.copy().astype({column: object})
    bad.loc[8, column] = np.nan
    assert f"row 9, column '{column}': missing value" in _fault(bad)


def test_negative_duration(good_log):
    bad = good_log.copy()
    bad.loc[10, "duration_s"] = -0.5
    assert "row 11, column 'duration_s': negative duration -0.5 s" in _fault(bad)


def test_trials_out_of_order(good_log):
    bad = good_log.copy()
    bad.loc[12, "trial"] = 3
    msg = _fault(bad)
    assert "row 13, column 'trial': trial out of order for participant 'P-0': 3 after 11" in msg


def test_onsets_out_of_order(good_log):
    bad = good_log.copy()
    bad.loc[5, "onset_s"] = bad.loc[4, "onset_s"]
    assert "row 6, column 'onset_s': onset out of order" in _fault(bad)


def test_every_fault_is_listed_not_just_the_first(good_log):
    bad = good_log.copy()
    bad.loc[1, "action"] = "voice"
    bad.loc[3, "duration_s"] = -1.0
    bad.loc[5, "command"] = "Nope"
    with pytest.raises(LogError) as err:
        validate_log(bad, WORLD.commands, source="x.parquet")
    assert [(f.row, f.column) for f in err.value.faults] == [(2, "action"), (4, "duration_s"), (6, "command")]


def test_unknown_file_type(tmp_path):
    p = tmp_path / "log.xlsx"
    p.write_text("x")
    with pytest.raises(LogError, match="unknown file type"):
        read_log(p, WORLD.commands)


@pytest.mark.parametrize(("name", "content", "expected"), [
    ("log.csv", b"", "log.csv: the file is empty (no header line)"),
    ("log.csv", b"participant,session,trial\n1,2,3\n4,5,6,7\n", "log.csv: cannot be read as CSV: Error tokenizing"),
    ("log.csv", b"\xff\xfe\x00 not text", "log.csv: cannot be read as CSV: 'utf-8' codec"),
    ("log.parquet", b"not a parquet file", "log.parquet: cannot be read as Parquet:"),
])
def test_unreadable_file_names_the_file_and_the_reason(tmp_path, name, content, expected):
    p = tmp_path / name
    p.write_bytes(content)
    with pytest.raises(LogError) as err:
        read_log(p, WORLD.commands)
    assert expected in str(err.value).replace(str(tmp_path) + "/", "")


def test_schedule_replays_the_log(good_log):
    trials = participant_trials(validate_log(good_log, WORLD.commands), "P-0")
    sched = schedule_of(trials)
    np.testing.assert_array_equal(sched.command, trials["command"].to_numpy())
    # default schedule: sessions separated by 24 h, so each new session adds 86,400 s of gap
    assert sched.gap_total_s[-1] == pytest.approx(86400.0 * (trials["session"].max()))


def test_replay_probabilities_match_the_fast_likelihood(good_log):
    trials = participant_trials(validate_log(good_log, WORLD.commands), "P-1")
    ctx = AgentContext(WORLD.commands.n_commands, len(trials), WORLD.commands.names,
                       tuple(WORLD.observation_names()))
    every = {"mechanisms": list(MECHANISMS)}
    for name, options, params in [("composed_learner", every, {"alpha": 0.4, "forget_rate_per_h": 0.05}),
                                  ("rw_choice_kernel", {}, {"alpha": 0.4, "beta_ck": 2.0}),
                                  ("static_softmax", {}, {"b_hotkey": 0.3, "w_learn_log_exposure": -0.7})]:
        spec = ModelSpec(name, options=options, fixed=params)
        agent = make_agent(name, ctx, **options, **params)
        p = replay_probabilities(agent, trials, ctx)
        codes = trials["action"].map({"menu": 0, "hotkey": 1, "learn": 2}).to_numpy()
        replay_ll = float(np.log(p[np.arange(len(codes)), codes]).sum())
        f, fast = loglik_function(spec, trials, ctx)
        assert fast
        theta = np.array([agent.params[n] for n in agent.param_specs()])
        assert f(theta) == pytest.approx(replay_ll, rel=1e-9)
