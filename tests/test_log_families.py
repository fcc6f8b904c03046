"""Trial logs: seconds as plain numbers, ids as text, non-negative counters, skipping bad participants."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.data.logs import LogError, read_log, validate_log, write_log
from shortcut_gym.lab.fitting import ModelSpec

WORLD = make_world()


@pytest.fixture(scope="module")
def log3() -> pd.DataFrame:
    return simulate_log(WORLD, ModelSpec("random"), 3, np.random.default_rng(1), prefix="P")


def _pid(log: pd.DataFrame, i: int) -> str:
    return str(pd.unique(log["participant"])[i])


@pytest.mark.parametrize(("column", "convert"), [
    ("duration_s", lambda s: pd.to_timedelta(s, unit="s")),
    ("onset_s", lambda s: pd.to_timedelta(s, unit="s")),
    ("onset_s", lambda s: pd.to_datetime(s, unit="s")),
    ("onset_s", lambda s: pd.to_datetime(s, unit="s").dt.tz_localize("UTC")),
    ("duration_s", lambda s: pd.to_datetime(s, unit="s")),
])
def test_timedelta_and_datetime_columns_are_refused_naming_the_column(log3, column, convert, tmp_path) -> None:
    bad = log3.assign(**{column: convert(log3[column])})
    path = tmp_path / "log.parquet"
    bad.to_parquet(path, index=False)
    with pytest.raises(LogError, match=f"column '{column}': holds .* values; give {column} as plain numbers"):
        read_log(path, WORLD.commands)


@pytest.mark.parametrize("pid", ["NA", "None", "null", "NaN", "nan", "N/A", "007", "1.0", "#N/A"])
@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_participant_ids_are_read_as_written(log3, pid, suffix, tmp_path) -> None:
    first = log3["participant"].iloc[0]
    log = log3.assign(participant=np.where(log3["participant"] == first, pid, log3["participant"]))
    path = write_log(log, tmp_path / f"log{suffix}")
    got = read_log(path, WORLD.commands)
    assert pid in set(got["participant"]) and got["participant"].map(type).eq(str).all()


@pytest.mark.parametrize(("column", "value"), [("session", -1), ("trial", -1), ("session", -10**6), ("trial", -3)])
def test_negative_sessions_and_trials_are_refused(log3, column, value) -> None:
    bad = log3.copy()
    bad[column] = bad[column].astype(np.int64)
    first = bad.index[bad["participant"] == _pid(log3, 1)][0]
    bad.loc[first, column] = value  # the first row of P1 keeps the order valid
    with pytest.raises(LogError, match=f"column '{column}': negative {column}"):
        validate_log(bad, WORLD.commands, "log.csv")


@pytest.mark.parametrize(("column", "value"), [("action", "voice"), ("duration_s", -1.0), ("command", "Fly"),
                                               ("session", -1), ("onset_s", np.nan)])
def test_skip_bad_participants_fits_the_rest_and_names_the_first_fault(log3, column, value) -> None:
    bad = log3.copy().astype({"session": np.int64})
    rows = bad.index[bad["participant"] == _pid(log3, 2)]
    bad.loc[rows[0], column] = value
    with pytest.raises(LogError):
        validate_log(bad, WORLD.commands, "log.csv")
    rest = validate_log(bad, WORLD.commands, "log.csv", skip_bad_participants=True)
    p0, p1, p2 = (_pid(log3, i) for i in range(3))
    assert set(rest["participant"]) == {p0, p1} and len(rest) == (log3["participant"] != p2).sum()
    skipped = rest.attrs["skipped_participants"]
    assert list(skipped) == [p2] and f"column '{column}'" in skipped[p2]


def test_a_fault_of_the_whole_table_is_not_skipped(log3) -> None:
    with pytest.raises(LogError, match="required column is missing"):
        validate_log(log3.drop(columns="duration_s"), WORLD.commands, skip_bad_participants=True)
    all_bad = log3.assign(action="voice")
    with pytest.raises(LogError):
        validate_log(all_bad, WORLD.commands, skip_bad_participants=True)


def test_cli_fit_skips_and_lists_bad_participants(log3, tmp_path: Path, capsys) -> None:
    bad = log3.copy()
    bad.loc[bad.index[bad["participant"] == _pid(log3, 1)][0], "action"] = "voice"
    path = write_log(bad, tmp_path / "log.csv")
    argv = ["fit", str(path), "--model", "random", "--starts", "1", "--out", str(tmp_path / "f"), "--quiet"]
    assert main(argv) == 2
    assert "unknown action 'voice'" in capsys.readouterr().err
    assert main([*argv, "--skip-bad-participants"]) == 0
    err = capsys.readouterr().err
    assert "skipped 1 participant(s)" in err and f"{_pid(log3, 1)!r}: " in err and "log.csv, row" in err
    fits = pd.read_csv(tmp_path / "f" / "fits.csv", dtype={"participant": str})
    assert set(fits["participant"]) == {_pid(log3, 0), _pid(log3, 2)}
