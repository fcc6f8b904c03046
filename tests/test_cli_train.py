"""``train`` saves a model that ``simulate``, ``sweep`` and ``score`` load through the one agent spec."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from shortcut_gym.agents import agent_from_spec, run_episode
from shortcut_gym.envs import CommandSelectionEnv, make_world
from shortcut_gym.lab.cli import main

SESSIONS = ["--sessions", "1"]  # the demo scenario's first session only: a short horizon


def _expected_actions(spec: dict, seeds: range) -> list[str]:
    env = CommandSelectionEnv(world=make_world(schedule={"sessions": 1}))
    agent = agent_from_spec(spec)
    return [a for s in seeds for a in run_episode(env, agent, seed=s)["action"]]


@pytest.mark.parametrize(("name", "file", "options"), [
    ("q_learning", "q.npz", ",epsilon=0"), ("ppo", "ppo.zip", ",deterministic=true"),
])
def test_trained_model_is_loaded_by_simulate_sweep_and_score(tmp_path: Path, capsys, name, file, options) -> None:
    model = tmp_path / "models" / file
    trials = "2048" if name == "ppo" else "600"
    assert main(["train", "--agent", name, *SESSIONS, "--trials", trials, "--out", str(model), "--quiet",
                 "--eval-users", "2"]) == 0
    captured = capsys.readouterr()
    assert "load it" not in captured.out  # status on stderr, results on stdout
    assert model.is_file() and f"load it with --agent {name}:model_path={model}" in captured.err
    spec_text = f"mine={name}:model_path={model}{options}"
    # simulate: the loaded model acts exactly as the same file loaded in-process
    assert main(["simulate", "--agent", spec_text, *SESSIONS, "--users", "2", "--seed", "50",
                 "--out", str(tmp_path / "sim")]) == 0
    sim = pd.read_parquet(tmp_path / "sim" / "trials.parquet")
    in_process = {"name": name, "model_path": str(model), **({"params": {"epsilon": 0.0}} if name == "q_learning"
                                                           else {"deterministic": True})}
    assert sim["agent"].unique().tolist() == ["mine"]
    assert sim["action"].tolist() == _expected_actions(in_process, range(50, 52))
    # an agent file next to the model names it relatively
    (tmp_path / "models" / "agent.yaml").write_text(f"name: {name}\nlabel: filed\nmodel_path: {file}\n"
                                                    + ("params: {epsilon: 0}\n" if name == "q_learning"
                                                       else "deterministic: true\n"))
    capsys.readouterr()
    # score: against the planner on the same users
    assert main(["score", "--agent-file", str(tmp_path / "models" / "agent.yaml"), "--agent", "always_menu",
                 *SESSIONS, "--users", "2", "--out", str(tmp_path / "score.csv")]) == 0
    score = pd.read_csv(tmp_path / "score.csv").set_index("agent")
    assert set(score.index) == {"filed", "always_menu", "bounded_optimal"}
    assert score.loc["bounded_optimal", "time_lost_s"] == 0.0
    # sweep: the spec's agent list replaced by the trained model
    spec = tmp_path / "sweep.yaml"
    spec.write_text("name: trained\nbase:\n  schedule: {sessions: 1}\n"
                    "vary: {design: grid, parameters: {costs.klm.keystroke_s: {values: [0.2]}}}\n"
                    "agents: [{name: always_menu}]\nseeds: {first: 50, count: 2}\noutputs: {trial_tables: true}\n")
    assert main(["sweep", str(spec), "--out", str(tmp_path / "sw"), "--quiet", "--workers", "1",
                 "--agent", spec_text]) == 0
    swept = pd.read_parquet(tmp_path / "sw" / "trials.parquet")
    assert set(swept["agent"]) == {"mine"}
    assert swept.sort_values(["user", "trial"])["action"].map(str).tolist() == sim["action"].tolist()


def test_train_refuses_what_it_cannot_train(tmp_path: Path, capsys) -> None:
    out = str(tmp_path / "m.zip")
    assert main(["train", "--agent", "always_menu", "--out", out]) == 2
    assert "not trained by this command; trainable: ['ppo', 'a2c', 'dqn', 'q_learning', 'sarsa']" in \
        capsys.readouterr().err
    assert main(["train", "--agent", "ppo", "--agent", "sarsa", "--out", out]) == 2
    assert "exactly one --agent" in capsys.readouterr().err
    assert main(["train", "--agent", "ppo:model_path=x.zip", "--out", out]) == 2
    assert "give the file to write with --out" in capsys.readouterr().err


def test_a_model_trained_on_another_world_is_refused(tmp_path: Path, capsys) -> None:
    model = tmp_path / "q.npz"
    assert main(["train", "--agent", "sarsa", *SESSIONS, "--trials", "30", "--out", str(model), "--quiet",
                 "--eval-users", "0"]) == 0
    small = tmp_path / "small.yaml"
    small.write_text("name: small\nmenus:\n  - title: File\n    items:\n      - {name: Open, hotkey: Ctrl+O}\n"
                     "      - {name: Save, hotkey: Ctrl+S}\n")
    capsys.readouterr()
    assert main(["simulate", "--scenario", str(small), "--agent", f"sarsa:model_path={model}", "--users", "1"]) == 2
    assert "train it on this scenario" in capsys.readouterr().err


def test_a_model_is_refused_on_other_costs_of_the_same_sizes_unless_allowed(tmp_path: Path, capsys) -> None:
    model = tmp_path / "q.npz"
    assert main(["train", "--agent", "q_learning", *SESSIONS, "--trials", "80", "--out", str(model), "--quiet",
                 "--eval-users", "0"]) == 0
    costs = tmp_path / "slow_keys.yaml"  # the default costs but a slower keystroke: same sizes, other problem
    costs.write_text("name: slow_keys\nklm: {keystroke_s: 0.5}\n")
    trained, other = (make_world(costs=c, schedule={"sessions": 1}) for c in (None, str(costs)))
    capsys.readouterr()
    simulate = ["simulate", "--costs", str(costs), *SESSIONS, "--users", "1", "--out", str(tmp_path / "sim")]
    assert main([*simulate, "--agent", f"q_learning:model_path={model}"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and str(model) in err and "(costs differ)" in err
    assert trained.problem_digest()[:12] in err and other.problem_digest()[:12] in err
    assert main([*simulate, "--agent", f"q_learning:model_path={model},allow_other_world=true"]) == 0
    warned = capsys.readouterr().err
    assert f"{model} was trained on the world" in warned and "used anyway as allow_other_world=true" in warned
    assert len(pd.read_parquet(tmp_path / "sim" / "trials.parquet")) == other.horizon
    # the same costs file as training's world, spelled out, is the same problem and runs unwarned
    same = tmp_path / "same.yaml"
    same.write_text("name: same\nklm: {keystroke_s: 0.2}\n")
    assert main(["simulate", "--costs", str(same), *SESSIONS, "--users", "1", "--overwrite",
                 "--out", str(tmp_path / "sim"), "--agent", f"q_learning:model_path={model}"]) == 0
    assert "allow_other_world" not in capsys.readouterr().err


def test_sweep_warns_once_per_world_about_a_model_used_on_other_worlds(tmp_path: Path, capsys) -> None:
    model = tmp_path / "q.npz"
    assert main(["train", "--agent", "q_learning", *SESSIONS, "--trials", "40", "--out", str(model), "--quiet",
                 "--eval-users", "0"]) == 0
    spec = tmp_path / "two_keystrokes.yaml"
    spec.write_text("name: two_keystrokes\nbase:\n  schedule: {sessions: 1, trials_per_session: 6}\n"
                    "vary:\n  design: grid\n  parameters:\n    costs.klm.keystroke_s: {values: [0.3, 0.5]}\n"
                    f"agents:\n  - {{name: q_learning, model_path: {model}, allow_other_world: true}}\n"
                    "seeds: {first: 0, count: 3}\n")
    capsys.readouterr()
    assert main(["-q", "sweep", str(spec), "--workers", "1", "--out", str(tmp_path / "sw")]) == 0
    warned = [line for line in capsys.readouterr().err.splitlines() if "used anyway as allow_other_world" in line]
    digests = {make_world(costs={"klm": {"keystroke_s": k}}, schedule={"sessions": 1, "trials_per_session": 6})
               .problem_digest()[:12] for k in (0.3, 0.5)}
    assert len(warned) == 2 and {d for d in digests if any(d in line for line in warned)} == digests
    assert all("(costs and schedule differ)" in line for line in warned)
