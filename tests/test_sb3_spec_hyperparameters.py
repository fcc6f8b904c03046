"""SB3 hyperparameters in an agent spec: on the one-line ``--agent`` form, beside the options in a
file, or under its ``hyperparameters:`` mapping. They reach the SB3 model (read back from SB3's own
attributes and from what they change: the network's width, the optimiser's class), the forms give
the same model, and unknown keys and wrong kinds are refused naming the key and where it came from.
Trainings are a few hundred steps on two users; torch is imported once for the whole module.
"""

from __future__ import annotations

import ast
import inspect
import re
import shlex
from pathlib import Path

import numpy as np
import pytest
import yaml

from shortcut_gym.agents import agent_from_spec, make_agent
from shortcut_gym.agents.registry import read_agent_spec
from shortcut_gym.agents.sb3 import DEFAULT_HYPERPARAMETERS
from shortcut_gym.envs import make_world
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.cli import CLIError, main
from shortcut_gym.lab.cli.options import parse_agent_arg

sb3 = pytest.importorskip("stable_baselines3")

SHORT = ["--sessions", "1"]
#: Constructor arguments of an SB3 class that no spec gives (the adapter sets them).
ADAPTER_SET = {"policy", "env", "seed", "verbose", "device", "_init_setup_model"}
CLASSES = {"ppo": sb3.PPO, "a2c": sb3.A2C, "dqn": sb3.DQN}

#: Per algorithm: the line's settings, and what the saved model must then report (SB3's own attributes).
LINES = {
    "ppo": ("n_steps=64,batch_size=64,n_epochs=1,learning_rate=3e-4,gamma=0.9,ent_coef=0.02,clip_range=0.1",
            {"n_steps": 64, "batch_size": 64, "n_epochs": 1, "learning_rate": 3e-4, "gamma": 0.9,
             "ent_coef": 0.02}),
    "a2c": ("n_steps=8,learning_rate=0.002,gamma=0.95,normalize_advantage=true,vf_coef=0.25",
            {"n_steps": 8, "learning_rate": 0.002, "gamma": 0.95, "normalize_advantage": True, "vf_coef": 0.25}),
    "dqn": ("buffer_size=500,learning_starts=20,train_freq=[2, step],exploration_final_eps=0.2,"
            "target_update_interval=50,batch_size=16",
            {"buffer_size": 500, "learning_starts": 20, "exploration_final_eps": 0.2, "target_update_interval": 50,
             "batch_size": 16}),
}
#: The same settings as a YAML mapping (written independently of the line text above).
MAPPINGS = {
    "ppo": {"n_steps": 64, "batch_size": 64, "n_epochs": 1, "learning_rate": 0.0003, "gamma": 0.9, "ent_coef": 0.02,
            "clip_range": 0.1},
    "a2c": {"n_steps": 8, "learning_rate": 0.002, "gamma": 0.95, "normalize_advantage": True, "vf_coef": 0.25},
    "dqn": {"buffer_size": 500, "learning_starts": 20, "train_freq": [2, "step"], "exploration_final_eps": 0.2,
            "target_update_interval": 50, "batch_size": 16},
}
ALGORITHMS = list(LINES)


def _known(name: str) -> set[str]:
    return set(inspect.signature(CLASSES[name]).parameters) - ADAPTER_SET


def _train_cli(tmp_path: Path, capsys, *agent_args: str, trials: int = 256) -> tuple[int, str]:
    out = tmp_path / "model.zip"
    code = main(["train", *agent_args, *SHORT, "--trials", str(trials), "--envs", "2", "--out", str(out),
                 "--quiet", "--eval-users", "0"])
    return code, capsys.readouterr().err


@pytest.mark.parametrize("name", ALGORITHMS)
def test_a_hyperparameter_on_the_line_reaches_the_saved_model(tmp_path: Path, capsys, name: str) -> None:
    line, expected = LINES[name]
    code, err = _train_cli(tmp_path, capsys, "--agent", f"{name}:{line}")
    assert code == 0, err
    model = CLASSES[name].load(str(tmp_path / "model.zip"), device="cpu")
    for key, value in expected.items():
        assert getattr(model, key) == pytest.approx(value), key
    assert model.lr_schedule(1.0) == pytest.approx(expected.get("learning_rate", model.learning_rate))
    if name == "ppo":
        assert model.clip_range(1.0) == pytest.approx(0.1)
    if name == "dqn":
        assert (model.train_freq.frequency, model.train_freq.unit.value) == (2, "step")
        assert model.exploration_rate == pytest.approx(0.2)  # 256 steps are past exploration_fraction 0.1


def test_the_line_reaches_the_model_in_process_too_and_changes_what_it_does() -> None:
    """Beyond SB3's recorded attributes: the buffer's size per user, the optimiser, the net's width."""
    world = make_world(schedule={"sessions": 1})
    dqn = agent_from_spec(parse_agent_arg("dqn:buffer_size=500,learning_starts=20,train_freq=[2, step]"))
    dqn.train(world, 100, seed=0, progress_bar=False, n_envs=2)
    assert dqn.model.replay_buffer.buffer_size == 250  # SB3 splits buffer_size over the users
    assert dqn.model.num_timesteps == 100
    a2c = agent_from_spec(parse_agent_arg("a2c:use_rms_prop=false,n_steps=4"))
    a2c.train(world, 16, seed=0, progress_bar=False, n_envs=2)
    import torch

    assert isinstance(a2c.model.policy.optimizer, torch.optim.Adam)  # RMSprop unless use_rms_prop is off
    assert isinstance(agent_from_spec({"name": "a2c", "n_steps": 4}).train(world, 16, progress_bar=False, n_envs=2)
                      .model.policy.optimizer, torch.optim.RMSprop)


@pytest.mark.parametrize("name", ALGORITHMS)
def test_file_and_line_forms_give_the_same_hyperparameters_and_the_same_model(tmp_path: Path, name: str) -> None:
    line, _ = LINES[name]
    under = tmp_path / "under.yaml"
    under.write_text(yaml.safe_dump({"name": name, "hyperparameters": MAPPINGS[name]}))
    beside = tmp_path / "beside.yaml"
    beside.write_text(yaml.safe_dump({"name": name, **MAPPINGS[name]}))
    half = dict(MAPPINGS[name])
    first = next(iter(half))
    split = tmp_path / "split.yaml"  # one key beside, the rest under, one key in both with the same value
    split.write_text(yaml.safe_dump({"name": name, first: half[first], "hyperparameters": half}))
    agents = [agent_from_spec(parse_agent_arg(f"{name}:{line}"))] + [agent_from_spec(p) for p in (under, beside, split)]
    agents.append(agent_from_spec(read_agent_spec(under).as_dict()))  # the CLI's path for --agent-file
    hyper = [a.hyperparameters for a in agents]
    assert all(h == hyper[0] for h in hyper), hyper
    assert {k: hyper[0][k] for k in MAPPINGS[name]} == {
        k: tuple(v) if isinstance(v, list) else v for k, v in MAPPINGS[name].items()}
    world = make_world(schedule={"sessions": 1})
    line_agent, file_agent = agents[0], agents[1]
    for agent in (line_agent, file_agent):
        agent.train(world, 128, seed=3, progress_bar=False, n_envs=2)
    line_state = line_agent.model.policy.state_dict()
    file_state = file_agent.model.policy.state_dict()
    assert list(line_state) == list(file_state)
    for key in line_state:
        np.testing.assert_array_equal(line_state[key].numpy(), file_state[key].numpy(), err_msg=key)


@pytest.mark.parametrize("name", ALGORITHMS)
def test_an_unknown_key_on_the_line_is_refused_listing_the_known_ones(tmp_path: Path, capsys, name: str) -> None:
    other = {"ppo": "buffer_size", "a2c": "n_epochs", "dqn": "n_epochs"}[name]  # another algorithm's key
    for key in ("n_stepz", other):
        code, err = _train_cli(tmp_path, capsys, "--agent", f"{name}:{key}=3")
        assert code == 2
        assert f"--agent '{name}:{key}=3' (command line)" in err and f"[{key!r}]" in err
        listed = ast.literal_eval(re.search(r"its hyperparameters: (\[.*?\])", err).group(1))
        assert set(listed) == _known(name)
        assert "deterministic" in err  # the adapter's own options are named too
        assert not (tmp_path / "model.zip").exists()


@pytest.mark.parametrize("name", ALGORITHMS)
def test_an_unknown_key_in_a_file_is_refused_naming_the_file(tmp_path: Path, capsys, name: str) -> None:
    for body in ({"hyperparameters": {"bogus_rate": 0.1}}, {"bogus_rate": 0.1}):
        path = tmp_path / "agent.yaml"
        path.write_text(yaml.safe_dump({"name": name, **body}))
        code, err = _train_cli(tmp_path, capsys, "--agent-file", str(path))
        assert code == 2 and str(path) in err and "'bogus_rate'" in err
        listed = ast.literal_eval(re.search(r"its hyperparameters: (\[.*?\])", err).group(1))
        assert set(listed) == _known(name)
        with pytest.raises(ConfigError, match=re.escape(str(path))):
            agent_from_spec(path)


@pytest.mark.parametrize("name", ALGORITHMS)
def test_keys_the_adapter_sets_are_refused(name: str) -> None:
    for key, value in (("seed", "3"), ("device", "cuda"), ("verbose", "1"), ("policy", "CnnPolicy"),
                       ("env", "x")):
        with pytest.raises(CLIError, match=rf"\['{key}'\] are set by the adapter"):
            parse_agent_arg(f"{name}:{key}={value}")
        with pytest.raises(ConfigError, match=rf"\['{key}'\] are set by the adapter"):
            make_agent(name, hyperparameters={key: value})


#: (algorithm, key=value on the line, what the error says the key takes)
WRONG_KINDS = [
    ("ppo", "n_steps=6.5", "a whole number"), ("ppo", "n_steps=true", "a whole number"),
    ("ppo", "learning_rate=fast", "a number"), ("ppo", "gamma=[0.9]", "a number"),
    ("ppo", "normalize_advantage=1", "true or false"), ("ppo", "policy_kwargs=[1]", "a mapping"),
    ("ppo", "target_kl=off", "a number"), ("ppo", "rollout_buffer_class=RolloutBuffer", "a class or function"),
    ("a2c", "use_rms_prop=sometimes", "true or false"), ("a2c", "n_steps=5.0", "a whole number"),
    ("a2c", "tensorboard_log=3", "text"),
    ("dqn", "buffer_size=1.5", "a whole number"), ("dqn", "train_freq=[2, 3]", "a list [whole number, text]"),
    ("dqn", "train_freq=[2]", "a whole number or a list"), ("dqn", "train_freq=often", "a whole number or a list"),
    ("dqn", "optimize_memory_usage=no_thanks", "true or false"),
]


@pytest.mark.parametrize(("name", "item", "wanted"), WRONG_KINDS)
def test_a_value_of_the_wrong_kind_is_refused_naming_the_key(name: str, item: str, wanted: str) -> None:
    key, _, value = item.partition("=")
    with pytest.raises(CLIError) as err:
        parse_agent_arg(f"{name}:{item}")
    text = str(err.value)
    assert f"hyperparameter {key} of stable_baselines3.{CLASSES[name].__name__} must be" in text
    assert wanted in text and "(command line)" in text
    with pytest.raises(ConfigError, match=f"hyperparameter {key} "):  # the file's mapping: the same check
        make_agent(name, hyperparameters={key: yaml.safe_load(value)})


def test_mappings_cannot_go_on_the_line_and_the_error_says_to_use_a_file(tmp_path: Path, capsys) -> None:
    code, err = _train_cli(tmp_path, capsys, "--agent", "ppo:policy_kwargs={net_arch: [8]}")
    assert code == 2 and "not a mapping" in err and "--agent-file" in err
    code, err = _train_cli(tmp_path, capsys, "--agent", "ppo:hyperparameters={n_steps: 64}")
    assert code == 2 and "--agent-file" in err
    path = tmp_path / "ppo.yaml"
    path.write_text("name: ppo\nhyperparameters:\n  n_steps: 32\n  batch_size: 32\n  n_epochs: 1\n"
                    "  policy_kwargs: {net_arch: [8]}\n")
    code, err = _train_cli(tmp_path, capsys, "--agent-file", str(path), trials=64)
    assert code == 0, err
    model = sb3.PPO.load(str(tmp_path / "model.zip"), device="cpu")
    assert model.policy_kwargs == {"net_arch": [8]}
    widths = [layer.out_features for layer in model.policy.mlp_extractor.policy_net if hasattr(layer, "out_features")]
    assert widths == [8]  # the default net is two layers of 64


def test_a_key_given_twice_with_two_values_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "twice.yaml"
    path.write_text("name: ppo\nn_steps: 32\nhyperparameters: {n_steps: 64}\n")
    with pytest.raises(ConfigError, match=r"n_steps given twice with two values, 64 under hyperparameters and 32"):
        read_agent_spec(path)
    with pytest.raises(ConfigError, match="given twice"):
        make_agent("dqn", buffer_size=100, hyperparameters={"buffer_size": 200})
    same = make_agent("dqn", buffer_size=100, hyperparameters={"buffer_size": 100})  # equal twice: accepted
    assert same.hyperparameters["buffer_size"] == 100


def test_a_spec_rebuilds_the_same_hyperparameters_and_the_defaults_are_known_keys() -> None:
    for name in ALGORITHMS:
        assert set(DEFAULT_HYPERPARAMETERS[name]) <= _known(name)
        agent = agent_from_spec(parse_agent_arg(f"{name}:{LINES[name][0]}"))
        again = agent_from_spec(agent.spec())
        assert again.hyperparameters == agent.hyperparameters
        assert {**DEFAULT_HYPERPARAMETERS[name], **agent.hyperparameters} == agent.hyperparameters
    assert make_agent("ppo", n_steps=64).hyperparameters["batch_size"] == DEFAULT_HYPERPARAMETERS["ppo"]["batch_size"]


@pytest.mark.parametrize(("line", "envs", "words"), [
    ("dqn:train_freq=[2, episode]", 2, "only one env"),  # SB3's own assert, on several users
    ("ppo:n_steps=1", 1, "n_steps * n_envs"),
])
def test_what_sb3_itself_refuses_is_one_line_naming_the_algorithm(tmp_path: Path, capsys, line, envs, words) -> None:
    code = main(["train", "--agent", line, *SHORT, "--trials", "64", "--envs", str(envs), "--out",
                 str(tmp_path / "m.zip"), "--quiet", "--eval-users", "0"])
    err = capsys.readouterr().err
    assert code == 2 and "refused its settings" in err and words in err and "Traceback" not in err


def test_train_help_shows_both_forms_and_its_examples_work(tmp_path: Path, capsys) -> None:
    with pytest.raises(SystemExit):
        main(["train", "--help"])
    text = capsys.readouterr().out
    assert "hyperparameters:" in text and "--agent-file" in text and "docs/configs.md" in text
    lines = [shlex.split(line.strip())[1] for line in text.splitlines() if line.strip().startswith("--agent '")]
    assert len(lines) >= 2 and any(line.startswith("ppo:n_steps=64") for line in lines)
    for line in lines:
        agent = agent_from_spec(parse_agent_arg(line))
        given = parse_agent_arg(line)
        for key, value in {**given.get("params", {}), **{k: v for k, v in given.items() if k not in
                                                          ("name", "params")}}.items():
            assert agent.hyperparameters[key] == (tuple(value) if isinstance(value, list) else value)
    block = text.split("holding\n", 1)[1].split("\nThe same keys", 1)[0]
    path = tmp_path / "ppo.yaml"
    path.write_text(inspect.cleandoc(block) + "\n")
    agent = agent_from_spec(path)
    assert agent.hyperparameters["policy_kwargs"] == {"net_arch": [32, 32]}
    assert agent.hyperparameters["learning_rate"] == pytest.approx(3e-4)


@pytest.mark.parametrize("name", ["q_learning", "sarsa"])
def test_the_tabular_agents_spec_is_unchanged(tmp_path: Path, name: str) -> None:
    spec = parse_agent_arg(f"{name}:learning_rate=0.2,epsilon=0.05")
    assert spec == {"name": name, "params": {"learning_rate": 0.2, "epsilon": 0.05}}
    agent = agent_from_spec(spec)
    assert agent.params["learning_rate"] == 0.2 and agent.params["epsilon"] == 0.05
    path = tmp_path / "t.yaml"
    path.write_text(f"name: {name}\nparams: {{learning_rate: 0.2, epsilon: 0.05}}\n")
    assert read_agent_spec(path).as_dict() == {"name": name, "params": {"learning_rate": 0.2, "epsilon": 0.05}}
    assert agent_from_spec(path).spec() == agent.spec()
    with pytest.raises(CLIError, match=f"n_steps is a hyperparameter of the SB3 agents .*, not a parameter or "
                                       f"option of {name}"):
        parse_agent_arg(f"{name}:n_steps=64")
    with pytest.raises(ConfigError, match=r"unknown parameter\(s\) \['n_steps'\]"):  # built without the check
        agent_from_spec({"name": name, "params": {"n_steps": 64}})
    path.write_text(f"name: {name}\nhyperparameters: {{n_steps: 64}}\n")
    with pytest.raises(ConfigError, match="hyperparameters"):
        agent_from_spec(path)
