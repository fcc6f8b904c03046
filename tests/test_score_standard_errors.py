"""``score``'s standard errors: ``time_lost_se_s`` is the sd of the per-user paired differences (agent
total minus the planner's on the same seed) / sqrt(users), ``total_time_se_s`` the sd of the per-user
totals / sqrt(users); NaN with one user. Checked against hand arithmetic on made-up trial tables and
against per-user totals from the batched simulator (another driver than score's)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents.scoring import score_trials
from shortcut_gym.envs import make_world
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.sweep.batch import simulate_users


def _trials(totals: dict[str, list[float]], per_user: int = 3) -> pd.DataFrame:
    """A trial table whose per-user totals are ``totals[agent][user]``, spread over ``per_user`` trials."""
    rows = []
    for agent, values in totals.items():
        for user, total in enumerate(values):
            for t in range(per_user):
                rows.append({"agent": agent, "user": user, "trial": t, "duration_s": total / per_user,
                             "outcome": "hotkey" if t == user % per_user else "menu", "action": "hotkey"})
    return pd.DataFrame(rows)


def test_the_standard_errors_by_hand() -> None:
    # paired differences 1, 2, 3, 6: mean 3, squared deviations 4 + 1 + 0 + 9 = 14, var 14/3, SE sqrt(14/3)/2
    ref = [10.0, 20.0, 30.0, 40.0]
    table = score_trials(_trials({"ref": ref, "a": [11.0, 22.0, 33.0, 46.0]}), "ref").set_index("agent")
    assert table.loc["a", "time_lost_s"] == pytest.approx(3.0)
    assert table.loc["a", "time_lost_se_s"] == pytest.approx(math.sqrt(14 / 3) / 2)
    # totals 11, 22, 33, 46: mean 28, squared deviations 289 + 36 + 25 + 324 = 674
    assert table.loc["a", "total_time_se_s"] == pytest.approx(math.sqrt(674 / 3) / 2)
    assert table.loc["ref", "time_lost_se_s"] == 0.0  # the reference against itself
    # equal differences: no spread, so no uncertainty, though the totals spread
    same = score_trials(_trials({"ref": ref, "a": [v + 5 for v in ref]}), "ref").set_index("agent")
    assert same.loc["a", "time_lost_s"] == pytest.approx(5.0) and same.loc["a", "time_lost_se_s"] == pytest.approx(0)
    assert same.loc["a", "total_time_se_s"] > 5


@pytest.mark.parametrize("users", [2, 3, 7, 20])
def test_the_standard_errors_on_random_totals(users: int) -> None:
    rng = np.random.default_rng(users)
    ref = rng.uniform(50, 150, users)
    a, b = ref + rng.normal(4, 3, users), rng.uniform(50, 150, users)
    table = score_trials(_trials({"ref": list(ref), "a": list(a), "b": list(b)}), "ref").set_index("agent")
    for name, totals in (("a", a), ("b", b)):
        d = totals - ref
        se = math.sqrt(sum((x - d.mean()) ** 2 for x in d) / (users - 1) / users)
        assert table.loc[name, "time_lost_se_s"] == pytest.approx(se, rel=1e-9)
        assert table.loc[name, "users"] == users


def test_one_user_has_no_standard_error() -> None:
    table = score_trials(_trials({"ref": [10.0], "a": [12.0]}), "ref").set_index("agent")
    assert table.loc["a", "time_lost_s"] == pytest.approx(2.0)
    assert np.isnan(table.loc["a", "time_lost_se_s"]) and np.isnan(table.loc["a", "total_time_se_s"])


def test_score_writes_the_standard_errors_of_the_per_user_totals(tmp_path: Path, capsys) -> None:
    out = tmp_path / "score.csv"
    seeds = range(5, 10)
    assert main(["score", "--sessions", "1", "--users", str(len(seeds)), "--seed", str(seeds[0]),
                 "--agent", "always_menu", "--agent", "random:p_hotkey=0.4,p_learn=0.2", "--out", str(out)]) == 0
    assert "time_lost_se_s" in capsys.readouterr().out.splitlines()[0]
    table = pd.read_csv(out).set_index("agent")
    world = make_world(schedule={"sessions": 1})
    totals = {name: simulate_users(world, spec, list(seeds)).time_s.sum(axis=1) for name, spec in (
        ("always_menu", {"name": "always_menu"}),
        ("random(p_hotkey=0.4,p_learn=0.2)", {"name": "random", "params": {"p_hotkey": 0.4, "p_learn": 0.2}}),
        ("bounded_optimal", {"name": "bounded_optimal"}))}
    assert set(table.index) == set(totals)
    for name, user_totals in totals.items():
        d = user_totals - totals["bounded_optimal"]
        assert table.loc[name, "time_lost_s"] == pytest.approx(d.mean(), abs=1e-6)
        assert table.loc[name, "time_lost_se_s"] == pytest.approx(d.std(ddof=1) / np.sqrt(len(d)), abs=1e-6)
        assert table.loc[name, "total_time_se_s"] == pytest.approx(
            user_totals.std(ddof=1) / np.sqrt(len(d)), abs=1e-6)
    assert table.loc["random(p_hotkey=0.4,p_learn=0.2)", "time_lost_se_s"] > 0


def test_score_help_says_what_the_standard_errors_are(capsys) -> None:
    with pytest.raises(SystemExit):
        main(["score", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "time_lost_se_s is the sd of the per-user paired differences" in text
    assert "/ sqrt(users)" in text and "with one user they are NaN" in text
