"""In a sweep's folder, ``user`` means one thing in every table: the user's position in the run's
seed list, with the seed beside it in ``seed``; joining trials.parquet to users.parquet on
(run_id, user) matches every trial, and the joined per-user sums are the users' totals."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from shortcut_gym.envs import make_world
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.sweep.batch import simulate_users, trial_table

SEEDS = [41, 7, 500, 12]  # out of order, so a position is never its seed and sorting by either differs


def test_trial_table_user_is_position_and_seed_is_seed() -> None:
    world = make_world(schedule={"sessions": 2, "trials_per_session": 5, "gap_h": 20.0})
    sums = simulate_users(world, {"name": "random"}, SEEDS, record="trials")
    table = trial_table(world, sums, "x")
    h = world.horizon
    assert table["user"].tolist() == list(np.repeat(np.arange(len(SEEDS)), h))
    assert table["seed"].tolist() == list(np.repeat(SEEDS, h))
    totals = table.groupby("user")["duration_s"].sum().to_numpy()
    np.testing.assert_allclose(totals, sums.time_s.sum(axis=1), rtol=1e-12)


def test_sweep_trials_join_users_on_user(tmp_path: Path) -> None:
    spec = tmp_path / "sweep.yaml"
    spec.write_text("name: joined\nbase:\n  schedule: {sessions: 2, trials_per_session: 6, gap_h: 20}\n"
                    "vary: {design: grid, parameters: {costs.klm.keystroke_s: {values: [0.2, 0.4]}}}\n"
                    "agents: [{name: always_menu}, {name: random, label: coin}]\n"
                    f"seeds: {SEEDS}\noutputs: {{trial_tables: true}}\n")
    assert main(["sweep", str(spec), "--out", str(tmp_path / "out"), "--quiet", "--workers", "1"]) == 0
    trials = pd.read_parquet(tmp_path / "out" / "trials.parquet")
    users = pd.read_parquet(tmp_path / "out" / "users.parquet")
    joined = trials.merge(users[["run_id", "user", "seed", "total_time_s"]], on=["run_id", "user"],
                          suffixes=("", "_users"), validate="many_to_one")
    assert len(joined) == len(trials) == 4 * len(SEEDS) * 12
    assert (joined["seed"] == joined["seed_users"]).all()
    per_user = joined.groupby(["run_id", "user"]).agg(total=("duration_s", "sum"), expected=("total_time_s", "first"))
    np.testing.assert_allclose(per_user["total"], per_user["expected"], rtol=1e-12)
    assert sorted(set(trials["user"])) == list(range(len(SEEDS)))
    assert sorted(set(trials["seed"])) == sorted(SEEDS)
