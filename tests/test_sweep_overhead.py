"""The per-run shortcuts of sweeps change no number: shared worlds, prebuilt columns, one warm-up per agent."""

from __future__ import annotations

import numpy as np
import pandas as pd

from shortcut_gym.lab.sweep.backends import warm_up_runs
from shortcut_gym.lab.sweep.batch import simulate_users
from shortcut_gym.lab.sweep.plan import plan_runs, run_world, world_from_settings
from shortcut_gym.lab.sweep.run import _repeat, block_table, command_table, user_table
from shortcut_gym.lab.sweep.spec import parse_spec

SPEC = {"name": "overhead", "base": {"schedule": {"sessions": 2, "trials_per_session": 8}},
        "vary": {"design": "grid", "parameters": {"memory.threshold": {"values": [-3.0, -2.5]}}},
        "agents": [{"name": "always_menu"}, {"name": "learn_first_k", "params": {"k": 1}},
                   {"name": "learn_first_k", "params": {"k": 2}}],
        "seeds": {"first": 0, "count": 3}, "outputs": {"plots": False}}


def test_equal_settings_share_one_world_equal_to_a_fresh_one() -> None:
    runs = plan_runs(parse_spec(SPEC))
    a, b, other = run_world(runs[0]["settings"]), run_world(runs[1]["settings"]), run_world(runs[3]["settings"])
    assert a is b and other is not a
    assert a.digest() == world_from_settings(runs[0]["settings"]).digest() != other.digest()


def test_prebuilt_columns_equal_pandas_scalar_broadcast() -> None:
    for value in ("label", 3, -2.5, True, None):
        ours = pd.DataFrame({"x": _repeat(value, 4), "n": np.arange(4)})
        pandas = pd.DataFrame({"x": value, "n": np.arange(4)})
        pd.testing.assert_frame_equal(ours, pandas, check_exact=True)


def test_tables_equal_the_scalar_broadcast_layout() -> None:
    run = {**plan_runs(parse_spec(SPEC))[4], "point": {"memory.threshold": -2.5, "scenario.name": "office"}}
    world = run_world(run["settings"])
    sums = simulate_users(world, run["agent"], run["seeds"])
    ident = {"run_id": run["run_id"], "run_index": run["index"], "point_index": run["point_index"],
             "agent": run["label"]}
    blocks = block_table(run, sums)
    n = len(blocks)
    expected = pd.DataFrame({**ident, **run["point"], "session": np.arange(1, n + 1)})
    pd.testing.assert_frame_equal(blocks[expected.columns.tolist()], expected, check_exact=True)
    commands = command_table(run, sums, world.commands.names)
    expected = pd.DataFrame({**ident, "command_name": list(world.commands.names)})
    pd.testing.assert_frame_equal(commands[expected.columns.tolist()], expected, check_exact=True)
    users = user_table(run, sums)
    expected = pd.DataFrame({**ident, "seed": np.asarray(sums.seeds)})
    pd.testing.assert_frame_equal(users[expected.columns.tolist()], expected, check_exact=True)


def test_one_tiny_warm_up_per_distinct_agent() -> None:
    runs = plan_runs(parse_spec(SPEC))
    warm = warm_up_runs(runs)
    assert [w["label"] for w in warm] == [r["label"] for r in runs[:3]]
    assert all(w["warm_up"] and len(w["seeds"]) == 1 and w["settings"]["schedule"]["sessions"] == 1 for w in warm)
