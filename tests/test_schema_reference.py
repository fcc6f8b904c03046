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
                assert f"| {prop.get('unit', 's')} |" in row, row


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


def _field_rows(text: str) -> list[list[str]]:
    """The cells of every row of every six-column field table (escaped pipes kept inside cells)."""
    rows, inside = [], False
    for line in text.splitlines():
        if line.startswith("| field | type | default | unit | allowed | description |"):
            inside = True
            continue
        if inside and line.startswith("| `"):
            cells = [c.strip() for c in re.split(r"(?<!\\)\|", line)[1:-1]]
            assert len(cells) == 6, line
            rows.append(cells)
        elif not line.startswith("|"):
            inside = False
    return rows


def _all_properties() -> dict[tuple[str, str], dict]:
    """(model, field) -> property of pydantic's own JSON schema, over every kind's models."""
    out = {}
    for _, path, _, _ in KINDS:
        model = _load(path)
        schema = model.model_json_schema()
        for name, definition in {model.__name__: schema, **schema.get("$defs", {})}.items():
            for field, prop in definition.get("properties", {}).items():
                out[(name, field)] = prop
    return out


def test_no_field_row_has_an_empty_description() -> None:
    rows = _field_rows(PAGE.read_text())
    properties = _all_properties()
    assert len(rows) == len(properties)  # every field of every model was parsed
    empty = [r[0] for r in rows if not r[5]]
    assert not empty, f"field rows without a description: {empty}"
    thin = sorted(f"{m}.{f}" for (m, f), p in properties.items() if len(p.get("description", "").split()) < 3)
    assert not thin, f"fields whose description is under three words: {thin}"


def _provenance_models() -> list[type]:
    from shortcut_gym.envs.costs import CostSettings
    from shortcut_gym.envs.memory import MemorySettings

    seen: list[type] = []
    todo: list[type] = [CostSettings, MemorySettings]
    while todo:
        model = todo.pop()
        seen.append(model)
        for field in model.model_fields.values():
            sub = field.annotation
            if isinstance(sub, type) and hasattr(sub, "model_fields") and sub not in seen + todo:
                todo.append(sub)
    return seen


PROVENANCE = re.compile(r"\(\d{4}\)|\d{4}[),;]|no source|from memory|common practice", re.I)


def test_every_numeric_default_of_the_time_and_memory_models_names_its_provenance() -> None:
    """A published source (author, year), 'from memory', 'common practice' or 'no source'."""
    missing = []
    for model in _provenance_models():
        for name, field in model.model_fields.items():
            default = field.default
            if isinstance(default, bool) or not isinstance(default, (int, float)):
                continue
            if not PROVENANCE.search(field.description or ""):
                missing.append(f"{model.__name__}.{name}")
    assert not missing, f"numeric defaults without a stated provenance: {missing}"
    assert len(_provenance_models()) == 9  # CostSettings and its 6 sections, MemorySettings and TraceWeights


def test_units_follow_the_name_unless_the_field_declares_its_own() -> None:
    properties = _all_properties()
    declared = {key for key, p in properties.items() if "unit" in p}
    assert ("MemorySettings", "noise_s") in declared
    section = _sections(PAGE.read_text())["MemorySettings"]
    row = next(r for r in _field_rows("| field | type | default | unit | allowed | description |\n" + section)
               if r[0] == "`noise_s`")
    assert row[3] == "" and "dimensionless" in row[5] and "not seconds" in row[5]
    for cells in _field_rows(PAGE.read_text()):
        name = cells[0].strip("`")
        if name.endswith("_s") and "_per_" not in name and name != "noise_s":
            assert cells[3] == "s", cells


def test_no_sphinx_role_or_double_backtick_reaches_the_page_and_constants_show_their_value() -> None:
    from shortcut_gym.envs.task import MAX_HORIZON

    text = PAGE.read_text()
    assert not re.findall(r":[a-z]+:`[^`]*`", text)
    outside_fences = re.sub(r"```.*?```", "", text, flags=re.S)
    assert "``" not in outside_fences
    assert f"`MAX_HORIZON` (= {MAX_HORIZON:,})" in text


@pytest.mark.parametrize(("text", "expected"), [
    (":data:`MAX_HORIZON` trials", "`MAX_HORIZON` (= 1,000,000) trials"),
    (":data:`MIN_TRIAL_INTERVAL_S`", "`MIN_TRIAL_INTERVAL_S` (= 0.1)"),
    (":data:`shortcut_gym.envs.costs.KLM_MENTAL_S`", "`shortcut_gym.envs.costs.KLM_MENTAL_S` (= 1.35)"),
    (":data:`~shortcut_gym.envs.costs.KLM_MENTAL_S`", "`KLM_MENTAL_S` (= 1.35)"),
    (":data:`NO_SUCH_CONSTANT`", "`NO_SUCH_CONSTANT`"),
    (":func:`hotkey_parts` and :mod:`shortcut_gym.envs.simulator`", "`hotkey_parts` and `shortcut_gym.envs.simulator`"),
    (":class:`~shortcut_gym.envs.task.CommandSpec`", "`CommandSpec`"),
    (":meth:`.error_bound`", "`error_bound`"),
    ("``gap_h`` between", "`gap_h` between"),
    ("no role here", "no role here"),
])
def test_markdown_text_renders_roles_as_code(text: str, expected: str) -> None:
    from build_schema_reference import markdown_text

    assert markdown_text(text, "shortcut_gym.envs.task") == expected


def _agent_sections() -> dict[str, str]:
    text = PAGE.read_text().split("\n### Agents\n", 1)[1].split("\n## ", 1)[0]
    parts = re.split(r"^#### (\w+)\n", text, flags=re.M)
    return dict(zip(parts[1::2], parts[2::2], strict=True))


def _table(section: str, first: str) -> list[dict[str, str]]:
    lines = section.splitlines()
    start = next((i for i, line in enumerate(lines) if line.startswith(f"| {first} |")), None)
    if start is None:
        return []
    head = [c.strip() for c in lines[start].strip("|").split("|")]
    out = []
    for line in lines[start + 2:]:
        if not line.startswith("|"):
            break
        out.append(dict(zip(head, [c.strip() for c in re.split(r"(?<!\\)\|", line)[1:-1]], strict=True)))
    return out


def _bound(cell: str, none: float) -> float:
    return none if cell == "none" else float(cell)


def _build(name: str, **kw: object) -> object:
    from shortcut_gym.agents.learning.mechanisms import MECHANISMS

    extra = {"mechanisms": list(MECHANISMS)} if name == "composed_learner" else {}
    return make_agent(name, **extra, **kw)


def test_every_registered_agent_has_a_section() -> None:
    from shortcut_gym.agents.registry import AGENTS

    assert list(_agent_sections()) == list(AGENTS)


@pytest.mark.parametrize("name", list(_agent_sections()) if PAGE.is_file() else [])
def test_agent_parameter_rows_match_what_the_agent_accepts(name: str) -> None:
    """Checked by building the agent: the default is what it holds, each bound is accepted, one past it refused."""
    rows = _table(_agent_sections()[name], "parameter")
    agent = _build(name)
    assert [r["parameter"].strip("`") for r in rows] == list(agent.params)
    for r in rows:
        p = r["parameter"].strip("`")
        assert agent.params[p] == pytest.approx(float(r["default"]), rel=1e-5), (name, p)
        assert r["meaning"], (name, p)
        lower, upper = _bound(r["lower"], -1e6), _bound(r["upper"], 1e6)
        for value in (lower, upper):
            _build(name, **{p: value})
        for value, shown in ((lower - 1, r["lower"]), (upper + 1, r["upper"])):
            if shown != "none":
                with pytest.raises(ConfigError, match=p):
                    _build(name, **{p: value})


@pytest.mark.parametrize("name", list(_agent_sections()) if PAGE.is_file() else [])
def test_agent_option_rows_are_accepted_with_their_shown_default(name: str) -> None:
    import yaml

    from shortcut_gym.agents.registry import OPTION_DOCS

    rows = _table(_agent_sections()[name], "option")
    for r in rows:
        option = r["option"].strip("`")
        assert r["meaning"], (name, option)
        if r["default"] == "**required**":
            with pytest.raises(ConfigError, match=option):
                make_agent(name)
            continue
        value = yaml.safe_load(r["default"].strip("`"))
        _build(name, **{option: value}) if option != "mechanisms" else make_agent(name, mechanisms=value)
    with pytest.raises(ConfigError):
        _build(name, no_such_option=1)
    used = {r["option"].strip("`") for s in _agent_sections().values() for r in _table(s, "option")}
    assert used == set(OPTION_DOCS), "OPTION_DOCS entries no agent takes, or options it lacks"


@pytest.mark.parametrize("height", [1.0, 7.5, 24.0, 300.0])
def test_the_item_height_cancels_as_its_description_says(height: float) -> None:
    """Fitts' law with D = (i + 0.5) h and W = h: the menu time is the same for every item height."""
    from shortcut_gym.envs.costs import CostSettings, MenuModel, menu_time_s

    assert "cancels" in (MenuModel.model_fields["item_height_px"].description or "")
    base, tall = CostSettings(), CostSettings(menu={"item_height_px": height})
    for item in range(6):
        for selection in (1, 2, 9):
            args = (8, item, 0.25, selection, False)
            assert menu_time_s(tall, *args) == pytest.approx(menu_time_s(base, *args), rel=1e-12)
    world = make_world(costs={"menu": {"item_height_px": height}})
    reference = make_world(costs={"menu": {"item_height_px": 24.0}})
    assert np.allclose(world.command_constants(), reference.command_constants(), rtol=1e-12, atol=0)
