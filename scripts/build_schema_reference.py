"""Generate docs/configs.md: the reference of every config kind, from its validation model.

Each kind (scenario, costs, memory, aids, agent spec, sweep spec; the population spec from its
reader's own tables) is documented from the pydantic
model that validates it: every field with its type, default, unit, allowed range and description,
under the docstring of the model that holds it (where the defaults' sources are named), and one
example that ``tests/test_schema_reference.py`` loads through the kind's own loader.

Usage: ``python scripts/build_schema_reference.py [--check]`` (``--check``: exit 1 when the page
differs from what the models give, without writing).
"""

from __future__ import annotations

import argparse
import inspect
import re
import sys
import types
import typing
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel
from pydantic.fields import FieldInfo
from pydantic_core import PydanticUndefined

ROOT = Path(__file__).resolve().parents[1]
PAGE = ROOT / "docs" / "configs.md"

#: (kind, model import path, how it is given, example YAML)
KINDS: list[tuple[str, str, str, str]] = [
    ("scenario", "shortcut_gym.envs.task:ScenarioSettings",
     "`--scenario NAME|FILE.yaml`, `make_world(scenario=...)`, `base.scenario` of a sweep spec; bundled: "
     "`configs/scenarios/`",
     "name: two_menus\nmenus:\n  - title: File\n    items:\n      - {name: Open, hotkey: Ctrl+O, weight: 3}\n"
     "      - {name: Save, hotkey: Ctrl+S, weight: 1}\n  - title: Edit\n    items:\n"
     "      - {name: Find, hotkey: Ctrl+F, weight: 2}\nschedule:\n  sessions: 3\n  trials_per_session: 20\n"
     "  gap_h: 24\n"),
    ("costs", "shortcut_gym.envs.costs:CostSettings",
     "`--costs NAME|FILE.yaml`, `make_world(costs=...)`, `base.costs`; bundled: `configs/costs/`; give only "
     "the fields that differ from the defaults",
     "name: fast_hands\nklm:\n  typist: good_typist\n  mental_s: 1.2\nlearn:\n  encoding_s: 2.0\n"),
    ("memory", "shortcut_gym.envs.memory:MemorySettings",
     "`--memory NAME|FILE.yaml`, `make_world(memory=...)`, `base.memory`; bundled: `configs/memory/`",
     "kind: actr\ndecay: 0.5\nthreshold: -3.0\nweights:\n  learn: 2.0\n  menu: 0.1\n"),
    ("aids", "shortcut_gym.envs.aids:AidSettings",
     "`make_world(aids=...)`, sweep axes under `aids.*`; bundled: `configs/aids/`",
     "name: labels_for_two\nkey_labels:\n  commands: [Open, Find]\n  search_s_per_label: 0.05\n"),
    ("agent spec", "shortcut_gym.agents.registry:AgentSpec",
     "`--agent-file FILE.yaml` (simulate, score, train, sweep, allot) or `--model-file FILE.yaml` (fit, "
     "recover, report, yardstick), or a bundled name of `configs/agents/`; `agent_from_spec(FILE)`; the same "
     "as `--agent` / `--model [label=]name[:key=value,...]` on the command line",
     "name: learn_first_k\nlabel: learner\nparams:\n  k: 2\n"),
    ("sweep spec", "shortcut_gym.lab.sweep.spec:SweepSpec",
     "`shortcut-gym sweep FILE.yaml`, `run_sweep(FILE)`; bundled: `configs/sweeps/`",
     "name: keystroke_grid\nbase:\n  schedule: {sessions: 1, trials_per_session: 8}\nvary:\n  design: grid\n"
     "  parameters:\n    costs.klm.keystroke_s: {values: [0.12, 0.28]}\nagents:\n  - {name: always_menu}\n"
     "  - {name: learn_first_k, params: {k: 1}}\nseeds: {first: 0, count: 2}\n"),
]

#: How a population spec is given, and its example (the page's population section).
POPULATION_GIVEN = ("`shortcut-gym simulate --population FILE.yaml` (truth file written beside the log), "
                    "`shortcut-gym recover --population FILE.yaml`, `read_population(FILE)`")
POPULATION_EXAMPLE = ("models:\n  delta:\n    agent: rescorla_wagner\n    participants: 3\n    parameters:\n"
                      "      alpha: {dist: uniform, low: 0.1, high: 0.9}\n      beta: {dist: lognormal, mu: 0.0, "
                      "sigma: 0.7}\n  sticky:\n    agent: composed_learner\n    options: {mechanisms: [value, "
                      "perseveration]}\n    participants: 2\n    parameters:\n      alpha: 0.3\n")

_UNIT_WORDS = {"s": "s", "h": "h", "ms": "ms", "px": "px", "min": "min"}


def unit_of(name: str, field: FieldInfo | None = None) -> str:
    """The unit a field's name carries (``encoding_s`` -> s, ``slope_s_per_bit`` -> s/bit,
    ``rate_per_h`` -> 1/h); empty for a count, a share or text. A field that declares its own
    ``unit`` (``json_schema_extra``, e.g. the dimensionless activation noise ``noise_s``) gets that."""
    extra = field.json_schema_extra if field is not None else None
    if isinstance(extra, dict) and "unit" in extra:
        return str(extra["unit"])
    parts = name.split("_")
    for i, part in enumerate(parts):
        if part == "per" and i + 1 < len(parts):
            top = _UNIT_WORDS.get(parts[i - 1], "1") if i > 0 else "1"
            return f"{top}/{parts[i + 1]}"
    return _UNIT_WORDS.get(parts[-1], "") if len(parts) > 1 else ""


def _model_of(annotation: Any) -> list[type[BaseModel]]:
    """The models a field's type names (itself, or inside a union, list or mapping)."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation]
    found: list[type[BaseModel]] = []
    for arg in typing.get_args(annotation):
        found += _model_of(arg)
    return found


def type_text(annotation: Any) -> str:
    """A short readable type: ``number``, ``whole number``, ``text``, ``a | b`` choices, ``list of X``."""
    origin = typing.get_origin(annotation)
    if origin is typing.Annotated:  # a tagged union's member: its type, the tag is no field
        return type_text(typing.get_args(annotation)[0])
    if origin is Literal:
        return " | ".join(f"`{a}`" for a in typing.get_args(annotation))  # _cell escapes the pipes
    if origin in (typing.Union, types.UnionType):
        return " or ".join(type_text(a) for a in typing.get_args(annotation))
    if origin is list:
        return f"list of {type_text(typing.get_args(annotation)[0])}"
    if origin is dict:
        key, value = typing.get_args(annotation)
        return f"mapping {type_text(key)} → {type_text(value)}"
    if annotation is Any:
        return "any"
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return f"[{annotation.__name__}](#{annotation.__name__.lower()})"
    return {float: "number", int: "whole number", str: "text", bool: "true/false", type(None): "null"}.get(
        annotation, getattr(annotation, "__name__", str(annotation)))


def default_text(field: FieldInfo) -> str:
    if field.is_required():
        return "**required**"
    if field.default_factory is not None:
        value = field.default_factory()  # type: ignore[call-arg]
    else:
        value = field.default
    if value is PydanticUndefined:
        return "**required**"
    if isinstance(value, BaseModel):
        return "see its table"
    if value is None:
        return "null"
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, str):
        return f"`{value}`" if value else '`""`'
    return f"`{value!r}`" if not isinstance(value, (list, dict)) or value else f"`{value!r}`"


def range_text(field: FieldInfo) -> str:
    bounds = []
    for meta in field.metadata:
        for attr, sign in (("gt", ">"), ("ge", "≥"), ("lt", "<"), ("le", "≤"), ("min_length", "length ≥"),
                           ("max_length", "length ≤"), ("pattern", "matches")):
            value = getattr(meta, attr, None)
            if value is not None:
                bounds.append(f"{sign} `{value}`" if attr == "pattern" else f"{sign} {value:g}"
                              if isinstance(value, float) else f"{sign} {value}")
    return ", ".join(bounds)


_ROLE = re.compile(r":(?:py:)?(data|func|mod|class|meth|attr|obj):`(~?)\.?([\w.]+)`")


def markdown_text(text: str, module: str) -> str:
    """Docstring text as Markdown: Sphinx roles become code (``:data:`X``` also gets the value of the
    constant ``X`` of ``module`` when it is a number), double backticks single ones."""

    def role(match: re.Match[str]) -> str:
        kind, short, target = match.groups()
        shown = target.rsplit(".", 1)[-1] if short else target
        if kind == "data":
            value = _constant(target, module)
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                return f"`{shown}` (= {value:,})" if isinstance(value, int) else f"`{shown}` (= {value:g})"
        return f"`{shown}`"

    return re.sub(r"``(.+?)``", r"`\1`", _ROLE.sub(role, text))


def _constant(target: str, module: str) -> Any:
    """The object ``target`` names, looked up in ``module`` (or as a dotted path); None if not found."""
    owner, _, name = target.rpartition(".")
    try:
        return getattr(__import__(owner or module, fromlist=[name]), name, None)
    except ImportError:
        return None


def _doc(model: type[BaseModel]) -> str:
    doc = inspect.getdoc(model) or ""
    if not doc or doc == inspect.getdoc(BaseModel):
        return ""
    return markdown_text(" ".join(doc.split()), model.__module__)


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ") if text else ""


def model_section(model: type[BaseModel], done: set[type[BaseModel]], depth: int = 3) -> list[str]:
    """Markdown of ``model``'s fields, then of every model nested in it (each once)."""
    done.add(model)
    lines = [f"{'#' * depth} {model.__name__}", ""]
    doc = _doc(model)
    if doc:
        lines += [doc, ""]
    extra = model.model_config.get("extra")
    lines += ["| field | type | default | unit | allowed | description |", "|---|---|---|---|---|---|"]
    nested: list[type[BaseModel]] = []
    for name, field in model.model_fields.items():
        description = markdown_text(field.description or "", model.__module__)
        lines.append(f"| `{name}` | {_cell(type_text(field.annotation))} | {_cell(default_text(field))} | "
                     f"{unit_of(name, field)} | {_cell(range_text(field))} | {_cell(description)} |")
        nested += [m for m in _model_of(field.annotation) if m not in done and m not in nested]
    lines.append("")
    if extra == "allow":
        lines += ["Other keys are allowed and passed on (see the description above).", ""]
    else:
        lines += ["Unknown keys are refused, naming the file and the dotted field.", ""]
    for sub in nested:
        if sub not in done:
            lines += model_section(sub, done, depth + 1)
    return lines


def _load(path: str) -> type[BaseModel]:
    module, _, name = path.partition(":")
    return getattr(__import__(module, fromlist=[name]), name)


def render() -> str:
    """The whole page."""
    out = [
        "# Config reference",
        "",
        "<!-- generated by scripts/build_schema_reference.py from the validation models; do not edit by hand "
        "(tests/test_schema_reference.py fails when this page is stale) -->",
        "",
        "Every config file is YAML, validated on load by the pydantic model named below: unknown keys, "
        "booleans given for numbers, `inf`/`nan`, keys given twice and out-of-range values are refused with "
        "the file and the dotted field named. Units are those the field names carry (`_s` seconds, `_h` "
        "hours, `_per_bit` per bit of information, `_px` pixels) unless the field declares its own (the "
        "activation noise `noise_s` is the letter s of the recall function, dimensionless); fields without a "
        "unit are counts, shares, dimensionless model constants or text. Each description gives the field's "
        "meaning and where its default comes from: a published source, common practice (no source), an "
        "assumption of this project, or a value recalled from memory (check the source before relying on it).",
        "",
        "| kind | model | given as |",
        "|---|---|---|",
    ]
    for kind, path, given, _ in KINDS:
        model = _load(path)
        out.append(f"| {kind} | [{model.__name__}](#{model.__name__.lower()}) | {_cell(given)} |")
    out.append(f"| population spec | [population spec](#population-spec) | {_cell(POPULATION_GIVEN)} |")
    out.append("")
    done: set[type[BaseModel]] = set()
    for kind, path, _, example in KINDS:
        model = _load(path)
        out += [f"## {kind[0].upper()}{kind[1:]}", "", f"Example ({kind}):", "",
                f"<!-- example: {kind} -->", "```yaml", example.rstrip("\n"), "```", ""]
        out += model_section(model, done)
        if kind == "agent spec":
            out += agents_section()
    out += population_section()
    return "\n".join(out).rstrip("\n") + "\n"


def _number(value: float) -> str:
    """A bound or default as text: whole numbers without a decimal point, infinities as words."""
    if value == float("inf"):
        return "none"
    if value == float("-inf"):
        return "none"
    return f"{value:g}"


def _option_default(value: Any) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, tuple):
        value = list(value)
    return f"`{value!r}`" if not isinstance(value, str) else f"`{value}`"


def agent_parameters(name: str) -> list[tuple[str, Any, str]]:
    """(parameter, ParamSpec, mechanism or "") of a registered agent; the composed learner with
    every mechanism listed, so that every parameter it can take is shown."""
    from shortcut_gym.agents.learning.mechanisms import MECHANISMS, owner_of
    from shortcut_gym.agents.learning.presets import COMPOSED
    from shortcut_gym.agents.registry import make_agent

    agent = make_agent(name, mechanisms=list(MECHANISMS)) if name == COMPOSED else make_agent(name)
    learning = hasattr(agent, "mechanisms")
    return [(p, spec, (owner_of(p) or "") if learning else "") for p, spec in agent.param_specs().items()]


def agent_options(name: str) -> list[tuple[str, str, str]]:
    """(option, default text, meaning) of a registered agent: its constructor's keywords besides
    the context and the parameters."""
    from shortcut_gym.agents.learning.presets import PublishedLearningModel
    from shortcut_gym.agents.registry import AGENTS, OPTION_DOCS

    cls = AGENTS[name]
    out = []
    for p in list(inspect.signature(cls.__init__).parameters.values())[1:]:
        if p.name == "context" or p.kind is inspect.Parameter.VAR_KEYWORD:
            continue
        if p.name not in OPTION_DOCS:
            raise KeyError(f"agent {name!r}: option {p.name!r} has no entry in agents.registry.OPTION_DOCS")
        default, meaning = _option_default(p.default), OPTION_DOCS[p.name]
        if p.name == "mechanisms" and issubclass(cls, PublishedLearningModel):
            default = f"`{list(cls.default_mechanisms)!r}`"
            meaning = "fixed: the published model's own mechanisms (for others use `composed_learner`)"
        elif p.name == "mechanisms":
            default = "**required**"
        out.append((p.name, default, meaning))
    return out


def agents_section() -> list[str]:
    """One table of parameters and one of options per registered agent."""
    from shortcut_gym.agents.registry import AGENTS

    out = ["### Agents", "",
           "Every registered agent (`name` of an agent spec), with its parameters (under `params`: a number "
           "within the bounds, inclusive; `none` = unbounded) and its options (beside `params`).", ""]
    for name, cls in AGENTS.items():
        summary = inspect.getdoc(cls) or ""
        summary = markdown_text(" ".join(summary.split("\n\n", 1)[0].split()), cls.__module__)
        out += [f"#### {name}", "", summary, ""]
        params = agent_parameters(name)
        if params:
            with_mech = any(m for _, _, m in params)
            head = "| parameter | default | lower | upper |" + (" mechanism |" if with_mech else "") + " meaning |"
            out += [head, "|---" * head.count(" | ") + "|---|"]
            for p, spec, mech in params:
                row = f"| `{p}` | {_number(spec.default)} | {_number(spec.lower)} | {_number(spec.upper)} |"
                out.append(row + (f" `{mech}` |" if with_mech else "") + f" {_cell(spec.doc)} |")
        else:
            out.append("No parameters.")
        out.append("")
        options = agent_options(name)
        if options:
            out += ["| option | default | meaning |", "|---|---|---|"]
            out += [f"| `{o}` | {_cell(d)} | {_cell(m)} |" for o, d, m in options]
            if any(p.kind is inspect.Parameter.VAR_KEYWORD and p.name != "params"
                   for p in inspect.signature(cls.__init__).parameters.values()):
                out += ["", "Any other key is a hyperparameter of the Stable-Baselines3 class (see AgentSpec)."]
        else:
            out.append("No options.")
        out.append("")
    return out


def population_section() -> list[str]:
    """The population spec (read by :func:`~shortcut_gym.lab.checks.population.read_population`, not a
    pydantic model): its keys and distributions, from the reader's own tables."""
    from shortcut_gym.lab.checks.population import DISTRIBUTION_MEANINGS, DISTRIBUTIONS, MAX_TRIES, MODEL_FIELDS

    out = ["## Population spec", "",
           "Per model, how many participants to simulate and a distribution for each parameter. The file holds "
           "one key, `models`, mapping a label of your own to a model entry. Draws outside a parameter's bounds "
           f"are drawn again (at most {MAX_TRIES:,} tries, else an error naming the parameter). Every fault names "
           "the file and the dotted field.", "",
           "Example (population spec):", "", "<!-- example: population spec -->", "```yaml",
           POPULATION_EXAMPLE.rstrip("\n"), "```", "",
           "### model entry (`models.<label>`)", "", "| field | type | default | meaning |", "|---|---|---|---|"]
    out += [f"| `{k}` | {_cell(t)} | {_cell(d)} | {_cell(m)} |" for k, (t, d, m) in MODEL_FIELDS.items()]
    out += ["", "### distributions (`parameters.<name>.dist`)", "", "| dist | numbers | meaning |", "|---|---|---|"]
    out += [f"| `{d}` | {', '.join(f'`{n}`' for n in DISTRIBUTIONS[d])} | {_cell(DISTRIBUTION_MEANINGS[d])} |"
            for d in DISTRIBUTIONS]
    out += ["", "`simulate --population FILE --log LOG` writes the true parameters beside the log as "
            "`<log stem>_truth.csv`: one row per participant with `participant`, `model` (the label), `agent`, "
            "`options` (the agent's options as JSON) and one column per parameter of the agent (free and fixed). "
            "Participants are named `<label>-<index>` (index 0, 1, ... within each model's block of the spec)."]
    return out + [""]


def examples(text: str) -> list[tuple[str, str]]:
    """(kind, YAML) of every example block of the page."""
    return re.findall(r"<!-- example: ([a-z ]+) -->\n```yaml\n(.*?)```", text, re.S)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true", help="exit 1 if the page is stale; write nothing")
    args = parser.parse_args(argv)
    text = render()
    if args.check:
        stale = not PAGE.is_file() or PAGE.read_text() != text
        if stale:
            print(f"{PAGE} is stale: run python scripts/build_schema_reference.py", file=sys.stderr)
        return 1 if stale else 0
    PAGE.write_text(text)
    print(f"wrote {PAGE}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
