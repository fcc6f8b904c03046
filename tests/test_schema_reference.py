"""docs/configs.md: generated from the validation models, current, complete, and its examples run."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from build_schema_reference import KINDS, PAGE, _load, examples, render

from shortcut_gym.agents import agent_from_spec, make_agent, run_episode
from shortcut_gym.agents.registry import read_agent_spec
from shortcut_gym.envs import CommandSelectionEnv, make_world
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.checks.population import read_population
from shortcut_gym.lab.checks.recovery import simulate_known
from shortcut_gym.lab.sweep.runner import run_sweep
from shortcut_gym.lab.sweep.spec import load_spec

ROOT = Path(__file__).resolve().parents[1]
SCENARIO_EXAMPLE = next(__import__("yaml").safe_load(t) for k, t in examples(PAGE.read_text()) if k == "scenario")


def test_the_page_is_what_the_generator_gives() -> None:
    assert PAGE.read_text() == render(), "docs/configs.md is stale: run python scripts/build_schema_reference.py"


def test_the_readme_links_the_page() -> None:
    assert "(docs/configs.md)" in (ROOT / "README.md").read_text()


def _sections(text: str) -> dict[str, str]:
    text = text.split("\n## Population spec", 1)[0]  # not a pydantic model: checked on its own below
    parts = re.split(r"^#{3,8} (\w+)\n", text, flags=re.M)
    return dict(zip(parts[1::2], parts[2::2], strict=True))


@pytest.mark.parametrize("kind", [k[0] for k in KINDS])
def test_every_field_of_every_nested_model_has_a_row(kind: str) -> None:
    """Checked against pydantic's own JSON schema of the model (an enumeration independent of the generator)."""
    model = _load(next(path for k, path, _, _ in KINDS if k == kind))
    schema = model.model_json_schema()
    definitions = {model.__name__: schema, **schema.get("$defs", {})}
    sections = _sections(PAGE.read_text())
    for name, definition in definitions.items():
        if "properties" not in definition:
            continue
        assert name in sections, f"no section for {name}"
        rows = re.findall(r"^\| `(\w+)` \|", sections[name], re.M)
        assert rows == list(definition["properties"]), name
        for field, prop in definition["properties"].items():
            row = next(r for r in sections[name].splitlines() if r.startswith(f"| `{field}` |"))
            if "default" in prop and not isinstance(prop["default"], (dict, list)):
                default = prop["default"]
                text = "null" if default is None else str(default).lower() if isinstance(default, bool) else \
                    f"`{default!r}`" if not isinstance(default, str) else f"`{default}`" if default else '`""`'
                assert text in row, (name, field, row)
            if field.endswith("_s") and "_per_" not in field:
                assert "| s |" in row, row


def _load_example(kind: str, path: Path, tmp_path: Path) -> object:
    """Load the example as a user would, and run something with it."""
    if kind in ("scenario", "costs", "memory", "aids"):
        scenario = {"scenario": SCENARIO_EXAMPLE} if kind == "aids" else {}  # the aids name its commands
        world = make_world(**{kind: path}, **scenario)
        env = CommandSelectionEnv(world=world)
        return run_episode(env, make_agent("learn_first_k", k=1), seed=0, max_trials=30)
    if kind == "population spec":
        models = read_population(path)
        world = make_world(schedule={"sessions": 1, "trials_per_session": 10})
        logs = [simulate_known(world, m.spec, m.participants, np.random.default_rng(0), population=m)[0]
                for m in models]
        assert [log["participant"].nunique() for log in logs] == [m.participants for m in models]
        return logs
    if kind == "agent spec":
        read_agent_spec(path)
        return run_episode(CommandSelectionEnv(world=make_world(schedule={"sessions": 1})), agent_from_spec(path), 0)
    load_spec(path)
    return run_sweep(path, tmp_path / "sweep", workers=1, progress=False)


@pytest.mark.parametrize(("kind", "text"), examples(PAGE.read_text()) if PAGE.is_file() else [])
def test_each_example_loads_and_runs_and_a_wrong_key_in_it_is_named(kind: str, text: str, tmp_path: Path) -> None:
    path = tmp_path / f"{kind.replace(' ', '_')}.yaml"
    path.write_text(text)
    result = _load_example(kind, path, tmp_path)
    assert result is not None and not getattr(result, "failed", [])
    path.write_text(text + "no_such_key: 1\n")
    if kind == "agent spec":  # extra keys are options passed to the agent, which refuses unknown ones
        with pytest.raises(ConfigError, match="no_such_key"):
            agent_from_spec(path)
        return
    if kind == "population spec":  # a wrong key at the top and inside a model entry are both named
        with pytest.raises(ConfigError, match=r"unknown key\(s\) \['no_such_key'\]") as err:
            _load_example(kind, path, tmp_path)
        assert path.name in str(err.value)
        path.write_text(text.replace("    participants: 3\n", "    participants: 3\n    no_such_key: 1\n"))
        with pytest.raises(ConfigError, match=r"models\.delta: unknown key\(s\) \['no_such_key'\]"):
            _load_example(kind, path, tmp_path)
        return
    with pytest.raises(ConfigError, match=r"no_such_key: unknown key") as err:
        _load_example(kind, path, tmp_path)
    assert path.name in str(err.value)


def test_every_kind_has_one_example() -> None:
    assert sorted(k for k, _ in examples(PAGE.read_text())) == sorted([k[0] for k in KINDS] + ["population spec"])


def test_the_population_section_lists_every_key_and_distribution_the_reader_takes() -> None:
    """Checked against what read_population accepts and refuses (not against the generator's tables)."""
    section = PAGE.read_text().split("## Population spec", 1)[1]
    rows = re.findall(r"^\| `(\w+)` \|", section, re.M)
    base = {"agent": "rescorla_wagner", "participants": 1, "parameters": {}, "options": {}}
    read_population({"models": {"m": base}})  # every listed key accepted together
    for key in ("agent", "options", "participants", "parameters"):
        assert key in rows
    with pytest.raises(ConfigError, match="unknown key"):
        read_population({"models": {"m": {**base, "weight": 1}}})
    for dist in ("uniform", "loguniform", "normal", "lognormal", "logitnormal"):
        assert dist in rows
        numbers = re.search(rf"^\| `{dist}` \| (.*?) \|", section, re.M).group(1)
        names = re.findall(r"`(\w+)`", numbers)
        law = {"dist": dist, **dict(zip(names, (0.2, 0.6), strict=True))}
        read_population({"models": {"m": {**base, "parameters": {"alpha": law}}}})
        with pytest.raises(ConfigError, match=dist):
            read_population({"models": {"m": {**base, "parameters": {"alpha": {"dist": dist}}}}})
    with pytest.raises(ConfigError, match="is not one of"):
        read_population({"models": {"m": {**base, "parameters": {"alpha": {"dist": "beta", "a": 1}}}}})
