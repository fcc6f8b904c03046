"""Aid studies: the ranking table's numbers are the paired per-user differences they claim to be."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import yaml

from shortcut_gym.envs import ConfigError, make_world
from shortcut_gym.envs.kernel import OUT_HOTKEY
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.design.aid_study import load_study, parse_study, run_study
from shortcut_gym.lab.sweep.batch import simulate_users

SCHEDULE = {"sessions": 3, "trials_per_session": 15}


def _study(**changes: Any) -> dict[str, Any]:
    data = {
        "name": "tiny",
        "base": {"schedule": SCHEDULE},
        "aids": {"delay": {"menu_delay": {"commands": "all", "delay_s": 0.7}},
                 "labels": "key_labels",
                 "lock": {"menu_lockout": {"commands": "all", "after_uses": 2}}},
        "population": {"path": "memory.threshold", "values": [-3.5, -2.5]},
        "agents": [{"name": "always_menu"}, {"name": "learn_first_k", "params": {"k": 1}},
                   {"name": "rescorla_wagner", "users": 7}],
        "users": {"first": 10, "count": 12},
    }
    data.update(changes)
    return data


@pytest.mark.parametrize(("change", "fault"), [
    ({"aids": {"x": "no_such_preset"}}, "aids.x: unknown interface aid preset 'no_such_preset'"),
    ({"aids": {"x": {"menu_delay": {"delay_s": 2.0}}}}, "aids.x: switches no aid on"),
    ({"aids": {"none": "menu_delay"}}, "'none' names the aid-free reference"),
    ({"aids": {"x": {"nudge": {"commands": ["Nope"]}}}}, "unknown command 'Nope'"),
    ({"population": {"path": "costs.klm.typo", "values": [1]}}, "population.path: unknown setting 'typo'"),
    ({"population": {"path": "aids.menu_delay.delay_s", "values": [1.0]}}, "cannot be an aid setting"),
    ({"population": {"path": "costs.klm.typist", "values": ["octopus"]}}, "typist"),
    ({"agents": [{"name": "no_such_agent"}]}, "agents[0]"),
    ({"agents": [{"name": "always_menu", "users": 0}]}, "agents.0.users"),
    ({"threads": 0}, "threads"),
])
def test_bad_studies_name_the_fault(change: dict, fault: str) -> None:
    with pytest.raises(ConfigError) as err:
        parse_study(_study(**change), "tiny.yaml")
    assert fault in str(err.value) and "tiny.yaml" in str(err.value)


def test_ranking_is_the_paired_difference_per_user() -> None:
    spec, aids = parse_study(_study())
    table = run_study(spec, aids)
    assert len(table) == 2 * 3 * 3
    seeds = list(range(10, 22))
    for (thr, label), part in table.groupby(["memory.threshold", "agent"]):
        agent = {"always_menu": {"name": "always_menu"}, "learn_first_k(k=1)": {"name": "learn_first_k",
                 "params": {"k": 1}}, "rescorla_wagner": {"name": "rescorla_wagner"}}[label]
        users = seeds[:7] if label == "rescorla_wagner" else seeds
        mem = {"threshold": thr}
        base = simulate_users(make_world(schedule=SCHEDULE, memory=mem), agent, users)
        for _, row in part.iterrows():
            aided = simulate_users(make_world(schedule=SCHEDULE, memory=mem, aids=aids[row["aid"]]), agent, users)
            saved = base.time_s.sum(axis=1) - aided.time_s.sum(axis=1)
            assert row["users"] == len(users)
            assert row["saved_s"] == pytest.approx(saved.mean(), rel=1e-12)
            assert row["saved_se_s"] == pytest.approx(saved.std(ddof=1) / np.sqrt(len(users)), rel=1e-9)
            assert row["pays_share"] == (saved > 0).mean()
            hot = aided.outcomes[:, :, OUT_HOTKEY] > 0
            firsts = [int(np.argmax(h)) + 1 for h in hot if h.any()]
            assert row["hotkey_users_share"] == len(firsts) / len(users)
            if firsts:
                assert row["first_hotkey_session"] == pytest.approx(np.mean(firsts))
        # the ranks order the aids by seconds saved
        ordered = part.sort_values("rank")
        assert list(ordered["rank"]) == sorted(ordered["rank"]) and ordered["saved_s"].is_monotonic_decreasing
    # truth for the fixed baseline: always menu pays the delay on every trial, never a hotkey
    menu = table[(table["agent"] == "always_menu") & (table["aid"] == "delay")]
    assert np.allclose(menu["saved_s"], -0.7 * 45, rtol=1e-12) and (menu["pays_share"] == 0).all()
    assert (table[table["agent"] == "always_menu"]["hotkey_users_share"] == 0).all()


def test_threads_do_not_change_the_table() -> None:
    spec, aids = parse_study(_study(agents=[{"name": "rescorla_wagner"}], users={"count": 9}))
    pd.testing.assert_frame_equal(run_study(spec, aids, threads=1), run_study(spec, aids, threads=2))


@pytest.mark.parametrize(("name", "path"), [("tidepool_aids", "costs.klm.typist"),
                                            ("tidepool_aids_memory", "memory.threshold")])
def test_bundled_studies_load(name: str, path: str) -> None:
    spec, aids = load_study(name)
    assert len(aids) == 5 and len(spec.population.values) == 4 and spec.population.path == path
    assert {a.name for a in spec.agents} >= {"bounded_optimal", "rescorla_wagner", "always_menu"}


def test_cli_writes_the_ranking_and_plot(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    study = tmp_path / "study.yaml"
    study.write_text(yaml.safe_dump(_study(agents=[{"name": "always_menu"}])))
    assert main(["aids", str(study), "--users", "3", "--out", str(tmp_path / "out")]) == 0
    table = pd.read_csv(tmp_path / "out" / "ranking.csv")
    assert len(table) == 6 and (table["users"] == 3).all()
    assert (tmp_path / "out" / "aids.png").stat().st_size > 1000
    assert "delay" in capsys.readouterr().out
    out2 = str(tmp_path / "o2")
    assert main(["aids", str(study), "--users", "2", "--agent", "learn_first_k:k=1", "--out", out2]) == 0
    assert set(pd.read_csv(tmp_path / "o2" / "ranking.csv")["agent"]) == {"learn_first_k(k=1)"}
    capsys.readouterr()
    study.write_text(yaml.safe_dump(_study(population={"path": "costs.klm.typo", "values": [1]})))
    assert main(["aids", str(study)]) == 2
    err = capsys.readouterr().err
    assert "population.path" in err and len(err.strip().splitlines()) == 1
