"""Faults of agent spec files and ``--agent`` texts: unknown keys named with what is known, the
file (or the option text) named in every fault, SB3-only keys said to be so."""

from __future__ import annotations

import inspect
from pathlib import Path

import pytest

from shortcut_gym.agents.registry import AGENTS, agent_from_spec, check_spec, read_agent_spec
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.cli import CLIError, main
from shortcut_gym.lab.cli.options import parse_agent_arg

#: Options of some agents, written out by hand from their constructors' documentation.
OPTIONS_BY_HAND = {
    "learn_first_k": [],
    "always_menu": [],
    "random": [],
    "q_learning": ["allow_other_world", "model_path"],
    "sarsa": ["allow_other_world", "model_path"],
    "static_softmax": ["covariates"],
    "composed_learner": ["mechanisms", "options"],
    "rescorla_wagner": ["mechanisms", "options"],
    "bounded_optimal": ["keyboard_share", "n_bins", "n_weight_bins", "select_users", "world"],
    "planned_choice": ["keyboard_share", "n_bins", "n_weight_bins", "select_users", "with_lapse", "world"],
}
NOT_SB3 = sorted(n for n in AGENTS if n not in ("ppo", "a2c", "dqn"))
#: What an agent's spec needs besides its name (composed_learner lists its mechanisms).
NEEDS = {"composed_learner": "mechanisms: [value, lapse]\n"}


def _listed(message: str, what: str, name: str) -> list[str]:
    """The names a message lists after ``'<what> of <name>: '`` (up to ';' or ')')."""
    head = f"{what} of {name}: "
    assert head in message, message
    text = message.split(head, 1)[1]
    text = text[: min(i for i in (text.find(";"), text.find(")")) if i >= 0)]
    return [] if text == "none" else text.split(", ")


def _write(tmp_path: Path, text: str, name: str = "spec.yaml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


@pytest.mark.parametrize("name", NOT_SB3)
def test_a_misspelt_field_is_an_unknown_key_naming_the_file_and_what_is_known(tmp_path: Path, name: str) -> None:
    path = _write(tmp_path, f"name: {name}\n{NEEDS.get(name, '')}parms: {{k: 1}}\n", "badkey.yaml")
    with pytest.raises(ConfigError) as err:
        read_agent_spec(path)
    message = str(err.value)
    assert message.startswith(f"{path}: unknown key 'parms' (spec fields: name, label, params, hyperparameters")
    assert message.endswith("did you mean 'params'?")
    options = _listed(message, "options", name)
    if name in OPTIONS_BY_HAND:
        assert options == OPTIONS_BY_HAND[name]
    built = agent_from_spec({"name": name, **({"mechanisms": ["value", "lapse"]} if name in NEEDS else {})})
    assert sorted(_listed(message, "parameters", name)) == sorted(built.param_specs())


@pytest.mark.parametrize("name", NOT_SB3)
def test_every_key_an_unknown_key_message_lists_is_accepted(tmp_path: Path, name: str) -> None:
    """What the message offers must really be taken: each listed parameter under params and beside,
    each listed option beside (with a value of its kind), passes the same check."""
    base = {"name": name, **({"mechanisms": ["value", "lapse"]} if name in NEEDS else {})}
    with pytest.raises(ConfigError) as err:
        check_spec({**base, "zzz": "x"}, "here")
    message = str(err.value)
    assert message.startswith("here: unknown key 'zzz' (parameters of")
    for key in _listed(message, "parameters", name):
        check_spec({**base, "params": {key: 0.5}}, "here")
        check_spec({**base, key: 0.5}, "here")
    sig = inspect.signature(AGENTS[name].__init__).parameters
    for key in _listed(message, "options", name):
        assert key in sig  # an option is a keyword of the constructor
        check_spec({**base, key: base.get(key, sig[key].default)}, "here")


def test_the_unknown_keys_are_all_named_and_those_under_params_said_to_be(tmp_path: Path) -> None:
    path = _write(tmp_path, "name: learn_first_k\nparams: {kk: 1}\n")
    with pytest.raises(ConfigError, match=r"spec.yaml: unknown key 'kk' under params \(.*\); did you mean 'k'\?"):
        read_agent_spec(path)
    path = _write(tmp_path, "name: learn_first_k\nfoo: 1\nbar: x\n")
    with pytest.raises(ConfigError, match=r"spec.yaml: unknown keys 'foo', 'bar' \(spec fields"):
        read_agent_spec(path)
    path = _write(tmp_path, "name: learn_first_k\nk: 1\n")  # a parameter beside params is taken
    assert agent_from_spec(path).params["k"] == 1


@pytest.mark.parametrize("name", ["q_learning", "sarsa", "learn_first_k", "composed_learner", "bounded_optimal"])
def test_hyperparameters_in_a_spec_of_an_agent_without_them_are_said_to_be_for_sb3(tmp_path: Path, name: str) -> None:
    path = _write(tmp_path, f"name: {name}\n{NEEDS.get(name, '')}hyperparameters: {{n_steps: 128}}\n")
    with pytest.raises(ConfigError) as err:
        read_agent_spec(path)
    message = str(err.value)
    assert message.startswith(f"{path}: hyperparameters: are for the SB3 agents only (ppo, a2c, dqn); {name} takes")
    assert "unknown parameter" not in message


@pytest.mark.parametrize("key", ["n_steps", "buffer_size", "gae_lambda", "ent_coef", "learning_starts"])
@pytest.mark.parametrize("name", ["q_learning", "learn_first_k"])
def test_an_sb3_hyperparameter_on_another_agent_names_the_sb3_agents_that_take_it(key: str, name: str) -> None:
    stable_baselines3 = pytest.importorskip("stable_baselines3")
    owners = [agent for agent, cls in (("ppo", stable_baselines3.PPO), ("a2c", stable_baselines3.A2C),
                                       ("dqn", stable_baselines3.DQN))
              if key in inspect.signature(cls).parameters]
    assert owners  # each key is some algorithm's
    text = f"{name}:{key}=64"
    with pytest.raises(CLIError) as err:
        parse_agent_arg(text)
    assert str(err.value).startswith(f"--agent {text!r} (command line): unknown key {key!r}: {key} is a "
                                     f"hyperparameter of the SB3 agents ({', '.join(owners)}), not a parameter "
                                     f"or option of {name} (parameters of {name}: ")


def test_a_key_no_agent_takes_gets_no_sb3_hint() -> None:
    with pytest.raises(CLIError) as err:
        parse_agent_arg("q_learning:n_stepz=64")
    assert "hyperparameter" not in str(err.value) and "unknown key 'n_stepz'" in str(err.value)


def test_a_folder_given_as_a_spec_file_is_said_to_be_a_folder(tmp_path: Path, capsys) -> None:
    assert main(["simulate", "--agent-file", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert f"{tmp_path}: is a folder, not an agent spec file" in err and err.count("\n") == 1


BAD_FILES = {
    "badkey.yaml": ("name: learn_first_k\nparms: {k: 1}\n", "unknown key 'parms'"),
    "badval.yaml": ("name: learn_first_k\nparams: {k: two}\n", "parameter k must be a number"),
    "range.yaml": ("name: q_learning\nparams: {epsilon: 2}\n", "parameter epsilon=2.0 is outside"),
    "mech.yaml": ("name: composed_learner\nmechanisms: [value, lapsee]\n", "unknown mechanism 'lapsee'"),
    "nomodel.yaml": ("name: q_learning\nmodel_path: nope.npz\n", "no Q table at"),
    "hyper.yaml": ("name: sarsa\nhyperparameters: {n_steps: 8}\n", "are for the SB3 agents only"),
    "sb3key.yaml": ("name: ppo\nn_stepz: 8\n", "unknown key(s) ['n_stepz']"),
}


@pytest.mark.parametrize("command", [["simulate"], ["score"], ["train"], ["sweep", "typing_vs_learning"],
                                     ["allot", "--budget", "1"]])
@pytest.mark.parametrize("file", sorted(BAD_FILES))
def test_every_fault_of_a_spec_file_names_the_file(tmp_path: Path, capsys, command: list[str], file: str) -> None:
    text, expected = BAD_FILES[file]
    path = _write(tmp_path, text, file)
    assert main([*command, "--agent-file", str(path), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    if command == ["train"] and file == "nomodel.yaml":  # train refuses any model file, before loading it
        expected = "the agent spec names a model_path; give the file to write with --out"
    assert err.count("\n") == 1 and f" {path}: " in err and expected in err, err
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("text", ["learn_first_k:kk=1", "learn_first_k:k=-1", "q_learning:model_path=nope.npz"])
def test_sweep_names_the_agent_option_not_the_spec_files_agent_list(tmp_path: Path, capsys, text: str) -> None:
    assert main(["sweep", "typing_vs_learning", "--agent", text, "--plan-only"]) == 2
    err = capsys.readouterr().err
    assert f"error: --agent {text!r} (command line): " in err and "agents[" not in err, err
    assert main(["sweep", "typing_vs_learning", "--agent", "always_menu", "--plan-only"]) == 0
