"""Population specs, the study's world on every analysis subcommand, and output folders kept safe."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.checks.population import read_population
from shortcut_gym.lab.cli import main

SPEC = {"models": {
    "rw": {"agent": "rescorla_wagner", "participants": 3,
           "parameters": {"alpha": {"dist": "uniform", "low": 0.2, "high": 0.4}, "beta": 2.0}},
    "sticky": {"agent": "composed_learner", "options": {"mechanisms": ["value", "perseveration"]},
               "participants": 2, "parameters": {"stickiness": {"dist": "normal", "mean": 1.0, "sd": 0.5}}},
}}


def _write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def test_population_draws_follow_the_spec() -> None:
    rw, sticky = read_population(SPEC)
    rng = np.random.default_rng(0)
    draws = [rw.draw(rng) for _ in range(200)]
    alphas = np.array([d["alpha"] for d in draws])
    assert alphas.min() >= 0.2 and alphas.max() <= 0.4 and {d["beta"] for d in draws} == {2.0}
    assert rw.describe() == {"alpha": "uniform(low=0.2, high=0.4)", "beta": "fixed 2"}
    st = np.array([sticky.draw(rng)["stickiness"] for _ in range(400)])
    assert abs(st.mean() - 1.0) < 0.1 and abs(st.std() - 0.5) < 0.1  # normal(1, 0.5), 400 draws
    assert "plausible range" in sticky.describe()["alpha"]  # not listed: documented plausible range


@pytest.mark.parametrize(("spec", "message"), [
    ({"model": {}}, "one key 'models'"),
    ({"models": {"x": {"agent": "nope"}}}, "models.x: unknown model 'nope'"),
    ({"models": {"rw": {"agent": "rescorla_wagner", "parameters": {"gamma": 1.0}}}}, "unknown parameter(s) ['gamma']"),
    ({"models": {"rw": {"agent": "rescorla_wagner", "parameters": {"alpha": {"dist": "cauchy"}}}}},
     "models.rw.parameters.alpha.dist"),
    ({"models": {"rw": {"agent": "rescorla_wagner", "parameters": {"alpha": {"dist": "uniform", "low": 0.5}}}}},
     "missing ['high']"),
    ({"models": {"rw": {"agent": "rescorla_wagner", "parameters": {"alpha": {"dist": "uniform", "low": 0.5,
                                                                             "high": 2.0}}}}}, "within the bounds"),
    ({"models": {"rw": {"agent": "rescorla_wagner", "parameters": {"beta": {"dist": "normal", "mean": 1,
                                                                            "sd": 0}}}}}, ".sd: must be > 0"),
    ({"models": {"rw": {"agent": "rescorla_wagner", "participants": 0}}}, "participants: must be a whole number"),
    ({"models": {"rw": {"agent": "rescorla_wagner", "colour": "red"}}}, "unknown key(s) ['colour']"),
    ({"models": {"rw": {"agent": "rescorla_wagner", "parameters": {"alpha": 3.0}}}}, "outside [0.0, 1.0]"),
])
def test_bad_population_specs_name_the_field(spec, message) -> None:
    with pytest.raises(ConfigError) as err:
        read_population(spec)
    assert message in str(err.value)


def test_simulate_population_writes_log_and_truth_and_keeps_files(tmp_path: Path, capsys) -> None:
    import yaml

    spec = _write(tmp_path / "pop.yaml", yaml.safe_dump(SPEC))
    schedule = _write(tmp_path / "schedule.yaml", "sessions: 2\ntrials_per_session: 15\n")
    log_path = tmp_path / "sim.csv"
    args = ["simulate", "--population", str(spec), "--log", str(log_path), "--schedule", str(schedule), "--seed", "4"]
    assert main(args) == 0
    log = pd.read_csv(log_path)
    truth = pd.read_csv(tmp_path / "sim_truth.csv")
    assert log["participant"].nunique() == 5 and len(log) == 5 * 30  # the schedule file's 2 x 15 trials
    assert set(truth["participant"]) == set(log["participant"]) and set(truth["model"]) == {"rw", "sticky"}
    assert truth.loc[truth["model"] == "rw", "beta"].eq(2.0).all()
    # the truth file names the generating agent and its options, so it can be refitted without the spec
    sticky = truth[truth["model"] == "sticky"]
    assert set(truth.loc[truth["model"] == "rw", "agent"]) == {"rescorla_wagner"}
    assert set(sticky["agent"]) == {"composed_learner"}
    mechanisms = SPEC["models"]["sticky"]["options"]["mechanisms"]
    assert all(json.loads(o) == {"mechanisms": mechanisms} for o in sticky["options"])
    assert "rw.alpha: uniform(low=0.2, high=0.4)" in capsys.readouterr().out
    # never overwritten without --overwrite
    assert main(args) == 2
    assert "the file exists; give --overwrite" in capsys.readouterr().err
    assert main(args + ["--overwrite"]) == 0
    # the fit sees the same world and refuses to write into a folder holding files
    out = tmp_path / "fits"
    fit = ["fit", str(log_path), "--model", "rescorla_wagner", "--starts", "2", "--schedule", str(schedule),
           "--out", str(out), "--quiet"]
    assert main(fit) == 0
    long = pd.read_csv(out / "parameters.csv")
    assert list(long.columns) == ["participant", "model", "parameter", "estimate", "se", "lower", "upper", "method"]
    assert len(long) == 5 * 2
    assert main(fit) == 2 and "already holds files" in capsys.readouterr().err


def test_recover_with_population_reports_the_draws_and_the_world(tmp_path: Path, capsys) -> None:
    import yaml

    small = {"models": {"rw": SPEC["models"]["rw"]}}
    spec = _write(tmp_path / "pop.yaml", yaml.safe_dump(small))
    out = tmp_path / "rec"
    assert main(["recover", "--population", str(spec), "--study", "parameters", "--sessions", "2",
                 "--costs", "slow_typist_mouse", "--starts", "1", "--out", str(out), "--quiet"]) == 0
    drawn = pd.read_csv(out / "true_parameters_drawn.csv")
    assert drawn.set_index("parameter")["drawn"].to_dict() == {"alpha": "uniform(low=0.2, high=0.4)",
                                                               "beta": "fixed 2"}
    index = (out / "index.md").read_text()
    assert "costs slow_typist_mouse" in index and "(80 trials per simulated participant)" in index
    summary = pd.read_csv(out / "parameter_recovery_rw.csv")
    assert {"interval_coverage", "drawn"} <= set(summary.columns)
    capsys.readouterr()
    assert main(["recover", "--population", str(spec), "--model", "rescorla_wagner", "--out",
                 str(tmp_path / "x")]) == 2
    assert "either --model/--model-file options or --population" in capsys.readouterr().err
    assert main(["recover", "--population", str(spec), "--model-file", "rescorla_wagner", "--out",
                 str(tmp_path / "x")]) == 2
    assert "either --model/--model-file options or --population" in capsys.readouterr().err
