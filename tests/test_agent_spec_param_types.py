"""Numbers under ``params:`` of an agent spec file keep the type the agent declares for them: a key
the constructor declares ``int`` (the planners' ``n_bins``, ...) stays a whole number (``4`` and
``4.0`` read as 4; ``4.5`` is refused naming the file, the agent and the key), a fitted parameter or
a ``float`` option is a float, and an SB3 hyperparameter keeps the number as written (SB3's own
annotation judges it). The file form gives what the command-line form gives."""

from __future__ import annotations

import types
import typing
from pathlib import Path

import pytest

from shortcut_gym.agents.registry import AGENTS, agent_from_spec, agent_options, read_agent_spec
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.cli import CLIError, main
from shortcut_gym.lab.cli.options import parse_agent_arg


def _arms(annotation: object) -> set[object]:
    if typing.get_origin(annotation) in (typing.Union, types.UnionType):
        return set(typing.get_args(annotation)) - {type(None)}
    return {annotation}


def _options_declared(kind: type) -> list[tuple[str, str]]:
    """(agent, option) of every registered agent's constructor option annotated ``kind`` (or ``kind | None``),
    read from the signatures here so that an agent added later is covered."""
    out = []
    for name, cls in sorted(AGENTS.items()):
        hints = typing.get_type_hints(cls.__init__)
        out += [(name, key) for key in agent_options(cls) if _arms(hints.get(key)) == {kind}]
    return out


INT_OPTIONS = _options_declared(int)
FLOAT_OPTIONS = _options_declared(float)


def _file(tmp_path: Path, name: str, params: str) -> Path:
    path = tmp_path / f"{name}.yaml"
    path.write_text(f"name: {name}\nparams: {{{params}}}\n")
    return path


def test_the_planners_int_options_are_found() -> None:
    assert {("bounded_optimal", "n_bins"), ("planned_choice", "n_weight_bins")} <= set(INT_OPTIONS)
    assert ("planned_choice", "keyboard_share") in FLOAT_OPTIONS


@pytest.mark.parametrize(("agent", "key"), INT_OPTIONS)
@pytest.mark.parametrize("written", ["4", "4.0", "12"])
def test_an_int_option_stays_a_whole_number(tmp_path: Path, agent: str, key: str, written: str) -> None:
    value = read_agent_spec(_file(tmp_path, agent, f"{key}: {written}")).as_dict()["params"][key]
    assert type(value) is int and value == int(float(written))


@pytest.mark.parametrize(("agent", "key"), INT_OPTIONS)
@pytest.mark.parametrize("written", ["4.5", "0.25", "-3.5"])
def test_a_fraction_for_an_int_option_is_refused_naming_file_agent_and_key(tmp_path: Path, agent: str, key: str,
                                                                           written: str) -> None:
    path = _file(tmp_path, agent, f"{key}: {written}")
    with pytest.raises(ConfigError) as err:
        read_agent_spec(path)
    text = str(err.value)
    assert text.startswith(f"{path}: ") and agent in text and key in text and written in text, text
    assert main(["simulate", "--agent-file", str(path), "--users", "1", "--sessions", "1"]) == 2
    with pytest.raises(CLIError) as line:  # the line form refuses it in the same words
        parse_agent_arg(f"{agent}:{key}={written}")
    assert str(line.value).split(": ", 1)[1] == text.split(": ", 1)[1]


@pytest.mark.parametrize(("agent", "key"), FLOAT_OPTIONS)
def test_a_float_option_is_a_float(tmp_path: Path, agent: str, key: str) -> None:
    value = read_agent_spec(_file(tmp_path, agent, f"{key}: 1")).as_dict()["params"][key]
    assert type(value) is float and value == 1.0


@pytest.mark.parametrize(("agent", "key"), [("learn_first_k", "k"), ("rescorla_wagner", "alpha"),
                                            ("random", "p_hotkey"), ("static_softmax", "b_hotkey")])
def test_a_fitted_parameter_is_a_float(tmp_path: Path, agent: str, key: str) -> None:
    value = read_agent_spec(_file(tmp_path, agent, f"{key}: 1")).as_dict()["params"][key]
    assert type(value) is float and value == 1.0


@pytest.mark.parametrize("text", ["bounded_optimal:n_bins=4,n_weight_bins=2,select_users=0",
                                  "planned_choice:n_bins=6,beta=2,keyboard_share=1",
                                  "learn_first_k:k=3", "rescorla_wagner:alpha=1,beta=2"])
def test_the_file_form_builds_what_the_line_form_builds(tmp_path: Path, text: str) -> None:
    """The same numbers on an --agent line and under a file's params: the same values of the same types,
    and the same agent built (its spec, types included)."""
    line = parse_agent_arg(text)
    inner = ", ".join(f"{k}: {v}" for k, v in line["params"].items())
    from_file = read_agent_spec(_file(tmp_path, line["name"], inner)).as_dict()
    assert from_file["params"] == line["params"]
    assert [type(v) for v in from_file["params"].values()] == [type(v) for v in line["params"].values()]
    built = [agent_from_spec(spec).spec() for spec in (from_file, line)]
    assert built[0] == built[1]
    assert [type(v) for v in built[0].values()] == [type(v) for v in built[1].values()]


def test_an_sb3_hyperparameter_under_params_keeps_its_number(tmp_path: Path) -> None:
    agent = agent_from_spec(_file(tmp_path, "ppo", "n_steps: 64, gamma: 1"))
    assert agent.hyperparameters["n_steps"] == 64 and type(agent.hyperparameters["n_steps"]) is int
    assert agent.hyperparameters["gamma"] == 1
    path = _file(tmp_path, "ppo", "n_steps: 64.5")
    with pytest.raises(ConfigError) as err:
        agent_from_spec(path)
    text = str(err.value)
    assert text.startswith(f"{path}: ") and "ppo" in text and "n_steps" in text and "64.5" in text, text
