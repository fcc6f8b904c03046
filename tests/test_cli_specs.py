"""The one agent-spec syntax of the CLI (YAML scalar values) and ``--agent-file`` specs."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from shortcut_gym.agents.registry import AGENTS, agent_from_spec, read_agent_spec
from shortcut_gym.envs.config import bundled_config_dir
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.cli import CLIError, main
from shortcut_gym.lab.cli.options import parse_agent_arg, parse_model
from shortcut_gym.lab.cli.specs import parse_spec, parse_value


@pytest.mark.parametrize(("text", "value"), [
    ("3", 3), ("-2", -2), ("0.5", 0.5), ("1e-3", 1e-3), ("1e+3", 1e3), ("-1.5E2", -150.0),
    ("true", True), ("False", False), ("yes", True), ("off", False),
    ("out/ppo.zip", "out/ppo.zip"), ("/tmp/m.npz", "/tmp/m.npz"), ("../a b/c.zip", "../a b/c.zip"),
    ("hello", "hello"), ("'true'", "true"), ('"3"', "3"), ("'a+b'", "a+b"),
    ("[a, b]", ["a", "b"]), ("[1, 2.5, true]", [1, 2.5, True]), ("[]", []), ("[value]", ["value"]),
    ("['a+b', c]", ["a+b", "c"]), ("'Ctrl+K'", "Ctrl+K"),
])
def test_values_are_yaml_scalars_or_lists(text: str, value) -> None:
    got = parse_value(text)
    assert got == value and type(got) is type(value)


@pytest.mark.parametrize(("text", "expected"), [
    ("", "empty value"), ("null", "no value"), ("~", "no value"), ("{a: 1}", "not a mapping"),
    ("a: 1", "not a mapping"), ("[1", "not valid YAML"),
])
def test_values_that_are_not_scalars_are_refused(text: str, expected: str) -> None:
    with pytest.raises(CLIError, match=expected):
        parse_value(text, "where")


@pytest.mark.parametrize(("text", "form"), [
    ("value+lapse", "[value, lapse]"), ("value+", "[value]"), ("a+1", "[a, 1]"),
    ("value + memory_aware+lapse", "[value, memory_aware, lapse]"), ("Ctrl+K", "[Ctrl, K]"),
])
def test_plus_joined_lists_are_refused_naming_the_bracket_form(text: str, form: str) -> None:
    with pytest.raises(CLIError) as err:
        parse_value(text, "where")
    message = str(err.value)
    assert message.startswith("where: ") and repr(text) in message
    assert f"square brackets, {form}" in message and f"'{text}', to keep it as text" in message


def test_plus_lists_are_refused_on_every_spec_option(tmp_path: Path) -> None:
    """--model and --agent name the option text and the bracket form; the bracket form works."""
    with pytest.raises(CLIError, match=r"model 'c=composed_learner:mechanisms=value\+lapse'.*\[value, lapse\]"):
        parse_model("c=composed_learner:mechanisms=value+lapse")
    assert list(parse_model("c=composed_learner:mechanisms=[value, lapse]").options["mechanisms"]) == ["value", "lapse"]
    with pytest.raises(CLIError, match=r"agent 'static_softmax:covariates=log_exposure\+session'.*"
                                       r"\[log_exposure, session\]"):
        parse_agent_arg("static_softmax:covariates=log_exposure+session")
    assert main(["simulate", "--agent", "composed_learner:mechanisms=value+lapse", "--users", "1",
                 "--out", str(tmp_path / "sim")]) == 2
    assert not (tmp_path / "sim").exists()


def test_spec_text_with_label_brackets_and_quotes() -> None:
    s = parse_spec("mine=ppo:model_path=out/p.zip,deterministic=true,mechanisms=[value, lapse],note='x,y'")
    assert (s.label, s.name) == ("mine", "ppo")
    assert s.values == {"model_path": "out/p.zip", "deterministic": True, "mechanisms": ["value", "lapse"],
                        "note": "x,y"}
    assert parse_spec("always_menu") == parse_spec("always_menu:")
    assert parse_spec("a:path=x=y").values == {"path": "x=y"}  # only the first '=' splits key from value


@pytest.mark.parametrize(("text", "expected"), [
    ("", "missing the name"), (":k=1", "missing the name"), ("=x", "empty label"),
    ("x:k", "'k' must look like key=value"), ("x:=1", "'=1' must look like key=value"),
    ("x:k=1,k=2", "key 'k' is given twice"), ("x:k=[1,2", "unclosed bracket"), ("x:k='a", "unclosed '"),
    ("x:k=1]", "unbalanced ']'"),
])
def test_bad_spec_text_names_the_fault(text: str, expected: str) -> None:
    with pytest.raises(CLIError, match=expected) as err:
        parse_spec(text)
    assert repr(text) in str(err.value)


def test_agent_and_model_options_read_the_same_syntax() -> None:
    agent = parse_agent_arg("lf=learn_first_k:k=2")
    assert agent == {"name": "learn_first_k", "params": {"k": 2}, "label": "lf"}
    assert agent_from_spec(agent).params["k"] == 2
    model = parse_model("lf=learn_first_k:k=2")
    assert (model.label, model.name, model.fixed) == ("lf", "learn_first_k", {"k": 2.0})
    sarsa = agent_from_spec(parse_agent_arg("sarsa:epsilon=0,learning_rate=1e-1"))
    assert sarsa.params["epsilon"] == 0 and sarsa.params["learning_rate"] == pytest.approx(0.1)
    with pytest.raises(CLIError, match="unknown agent 'nope'"):
        parse_agent_arg("nope:k=1")
    with pytest.raises(CLIError, match="parameter k must be a number, got 'two'"):
        parse_model("learn_first_k:k=two")


def test_every_bundled_agent_spec_validates_and_builds() -> None:
    files = sorted((bundled_config_dir() / "agents").glob("*.yaml"))
    assert len(files) >= 10
    for path in files:
        spec = read_agent_spec(path)
        assert spec.name in AGENTS
        if spec.name not in ("bounded_optimal",):  # the planner needs a world to plan for
            agent_from_spec(path)
    assert read_agent_spec("learn_first_k").params == {"k": 2}  # a bare name is a bundled spec


@pytest.mark.parametrize(("text", "expected"), [
    ("params: {k: 1}\n", "name: Field required"),
    ("name: nope\n", "name: unknown agent 'nope'"),
    ("name: learn_first_k\nparams: {k: yes}\n", "params: parameter k must be a number"),
    ("name: learn_first_k\nparams: {k: two}\n", "parameter k must be a number, got 'two'"),
    ("name: learn_first_k\nparams: {k: .inf}\n", "params: parameter k must be a finite number, got inf"),
    ("name: learn_first_k\nparams: {k: .nan}\n", "params: parameter k must be a finite number, got nan"),
    ("name: learn_first_k\nname: always_menu\n", "key 'name' is given twice"),
    ("name: learn_first_k\nparams: [1]\n", "params: Input should be a valid dictionary"),
    ("- name: x\n", "expected a mapping"),
])
def test_bad_agent_files_name_the_file_and_field(tmp_path: Path, text: str, expected: str) -> None:
    path = tmp_path / "spec.yaml"
    path.write_text(text)
    with pytest.raises(ConfigError, match="spec.yaml") as err:
        read_agent_spec(path)
    assert expected in str(err.value)


def test_a_relative_model_path_is_read_from_the_spec_files_folder(tmp_path: Path) -> None:
    (tmp_path / "models").mkdir()
    path = tmp_path / "models" / "ppo.yaml"
    path.write_text("name: ppo\nlabel: mine\nmodel_path: ppo.zip\n")
    spec = read_agent_spec(path).as_dict()
    assert spec == {"name": "ppo", "params": {}, "model_path": str(tmp_path / "models" / "ppo.zip"), "label": "mine"}


def test_simulate_takes_agent_text_and_files_with_labels(tmp_path: Path, capsys) -> None:
    spec = tmp_path / "lf.yaml"
    spec.write_text("name: learn_first_k\nlabel: learner\nparams: {k: 1}\n")
    out = tmp_path / "sim"
    code = main(["simulate", "--agent", "menu=always_menu", "--agent-file", str(spec), "--users", "2",
                 "--out", str(out)])
    assert code == 0
    trials = pd.read_parquet(out / "trials.parquet")
    assert list(dict.fromkeys(trials["agent"])) == ["menu", "learner"]
    assert set(trials.loc[trials["agent"] == "menu", "action"]) == {"menu"}
    learner = trials[trials["agent"] == "learner"]
    first = learner.groupby("command", sort=False).head(1)
    assert set(first["action"]) == {"learn"}  # k=1: the first use of each command learns


def test_cli_spec_faults_exit_2_naming_them(tmp_path: Path, capsys) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text("name: learn_first_k\nparams: {k: two}\n")
    assert main(["simulate", "--agent-file", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "bad.yaml: params" in err and "'two'" in err and err.count("\n") == 1
    assert main(["simulate", "--agent", "learn_first_k:k=[1"]) == 2
    assert "unclosed bracket" in capsys.readouterr().err


@pytest.mark.parametrize("quiet", [False, True])
def test_status_lines_go_to_stderr_and_quiet_hides_them(tmp_path: Path, capsys, quiet: bool) -> None:
    """Results on stdout, status ("wrote ...") on stderr through the package logger; -q hides status."""
    log = tmp_path / "log.csv"
    argv = ["simulate", "--agent", "always_menu", "--users", "2", "--sessions", "1", "--log", str(log)]
    assert main((["-q"] if quiet else []) + argv) == 0
    captured = capsys.readouterr()
    assert log.is_file()
    assert "wrote" not in captured.out
    assert ("wrote trial log" in captured.err) is not quiet
