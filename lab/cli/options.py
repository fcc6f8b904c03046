"""Option and spec parsing shared by the subcommands (the one place CLI strings are read).

Every fault raises :class:`CLIError` naming the option text; ranges and paths: :mod:`.ranges`.

* ``--model`` and ``--agent``: the one spec syntax of :mod:`.specs`, ``[label=]name[:key=value,...]``
  with YAML scalar values; for ``--model`` keys that are parameters are held fixed, others are
  constructor options (a list in square brackets: ``mechanisms=[value, memory_aware, lapse]``).
  ``--agent-file``: an agent spec YAML.
* ``--prior label:param=family:a:b``: a MAP prior (families in :data:`PRIOR_FAMILIES`).
"""


import argparse
import logging
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any, NamedTuple

import pandas as pd
from pydantic import create_model

from shortcut_gym.agents.planner.memory_model import planner_memory_refusal
from shortcut_gym.agents.registry import (
    AGENTS,
    agent_from_spec,
    check_spec,
    make_agent,
    read_agent_spec,
    typed_params,
)
from shortcut_gym.envs.config import load_settings, read_yaml, validate
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.strict import StrictModel
from shortcut_gym.envs.task import ScenarioSettings, ScheduleSettings
from shortcut_gym.envs.world import DEFAULT_SCENARIO, World, make_world
from shortcut_gym.lab.cli import DETAIL_LOGGER, CLIError
from shortcut_gym.lab.cli.ranges import input_file, output_folder, seed, whole_number
from shortcut_gym.lab.cli.specs import SYNTAX, agent_spec_dict, is_number, parse_spec
from shortcut_gym.lab.data.logs import read_log
from shortcut_gym.lab.fitting import INTERVAL_METHODS, PRIOR_FAMILIES, ModelSpec, make_prior

MODEL_HELP = (f"model as {SYNTAX}; keys that are parameters are held fixed, others are options; values are "
              "YAML scalars, [a, b] makes a list (repeatable), e.g. "
              "mine=composed_learner:mechanisms=[value, perseveration, lapse]")


MODEL_FILE_HELP = ("model spec YAML, read and checked as --agent-file reads an agent (name, label, params, options "
                   "beside them; or a bundled spec's name such as composed_myopic): its params are held fixed, the "
                   "model's other parameters fitted, as for the keys of a --model line (repeatable, after the --model "
                   "models)")


#: Status lines of the CLI (which files were written): on stderr through the package logger, so
#: stdout holds results only and ``-q`` hides them.
_STATUS = logging.getLogger("shortcut_gym.cli")


#: What a subcommand is doing (world, agents, users, outputs): INFO lines that only ``-v`` shows.
_DETAIL = logging.getLogger(DETAIL_LOGGER)


def status(message: str) -> None:
    """Report a status line (stderr; hidden by ``-q``)."""
    _STATUS.info(message)


def detail(message: str) -> None:
    """Say what is being done (stderr, shown by ``-v`` only)."""
    _DETAIL.info(message)


def warn(message: str) -> None:
    """Report something the user should look at (stderr; shown even with ``-q``)."""
    _STATUS.warning(message)


def counted(n: int, noun: str) -> str:
    """``n`` and the noun, plural unless ``n`` is 1: ``1 participant``, ``3 participants``."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"


def parse_model(text: str) -> ModelSpec:
    """'[label=]name[:key=value,...]' -> ModelSpec (the syntax of :mod:`.specs`); keys that are
    parameters are held fixed, the others are options.

    Example: ``logit2=static_softmax:covariates=[log_exposure,session],b_learn=-3``.
    """
    spec = parse_spec(text, "model")
    if spec.name not in AGENTS:
        raise CLIError(f"model {text!r}: unknown agent {spec.name!r}; registered: {sorted(AGENTS)}")
    return model_of_values(spec.name, spec.label, dict(spec.values), f"--model {text!r} (command line)")


def model_of_values(name: str, label: str | None, values: dict[str, Any], where: str) -> ModelSpec:
    """The :class:`ModelSpec` of a registered agent ``name`` given ``values`` by key (a ``--model``
    line's, or a ``--model-file``'s params and options together): those that are parameters of the
    agent are held fixed, the others are its options. Faults raise CLIError starting with ``where``."""
    options = dict(values)
    try:
        check_spec({"name": name, "params": {k: v for k, v in options.items() if is_number(v)},
                    **{k: v for k, v in options.items() if not is_number(v)}}, where)
        probe = make_agent(name, **{k: v for k, v in options.items() if not is_number(v)})
    except ConfigError as err:
        message = str(err)
        raise CLIError(message if message.startswith(where) else f"{where}: {message}") from None
    fixed: dict[str, float] = {}
    for key in list(options):
        if key in probe.param_specs():
            value = options.pop(key)
            if not is_number(value):
                raise CLIError(f"{where}: parameter {key} value {value!r} is not a number")
            fixed[key] = float(value)
    try:
        return ModelSpec(name, label or "", options, fixed)
    except ConfigError as err:
        raise CLIError(f"{where}: {err}") from None


def read_model_file(path: Path) -> ModelSpec:
    """A ``--model-file`` spec: read and checked as an ``--agent-file`` is (the same faults, naming the
    file), its ``params`` held fixed and the keys beside them its options, as on a ``--model`` line."""
    spec = built_once(read_spec_file(path), str(path))
    values = {**spec.get("params", {}), **{k: v for k, v in spec.items() if k not in ("name", "label", "params")}}
    return model_of_values(spec["name"], spec.get("label"), values, str(path))


def add_model_options(p: argparse.ArgumentParser, line_help: str = MODEL_HELP) -> None:
    """``--model TEXT`` and ``--model-file YAML`` (both repeatable; the lines first, then the files)."""
    p.add_argument("--model", action="append", default=None, help=line_help)
    p.add_argument("--model-file", action="append", default=None, type=Path, help=MODEL_FILE_HELP)


def parse_prior(text: str) -> tuple[str, Any]:
    """'name=family:a:b' -> (parameter, frozen scipy distribution on the natural scale).

    Families: normal:mean:sd, beta:a:b, gamma:shape:scale, lognormal:mu:sigma (of ln x).
    """
    name, eq, rest = text.partition("=")
    parts = rest.split(":")
    if not eq or not name or len(parts) != 3 or parts[0] not in PRIOR_FAMILIES:
        raise CLIError(f"prior {text!r} must look like name=family:a:b with family in {sorted(PRIOR_FAMILIES)}")
    try:
        a, b = float(parts[1]), float(parts[2])
    except ValueError:
        raise CLIError(f"prior {text!r}: {parts[1]!r} and {parts[2]!r} must be numbers") from None
    try:
        return name, make_prior(parts[0], a, b)
    except ValueError as err:  # make_prior's faults are all about the numbers given
        raise CLIError(f"prior {text!r}: {err}") from None


def agent_where(text: str) -> str:
    """How a fault names an ``--agent`` option's text."""
    return f"--agent {text!r} (command line)"


def parse_agent_arg(text: str) -> dict[str, Any]:
    """``--agent`` text (the syntax of :mod:`.specs`) -> agent spec dict; faults raise CLIError naming it,
    among them what can be told before the agent is built (unknown keys, an SB3 agent's hyperparameters)."""
    spec = agent_spec_dict(text)
    if spec["name"] not in AGENTS:
        raise CLIError(f"agent {text!r}: unknown agent {spec['name']!r}; registered: {sorted(AGENTS)}")
    try:  # each number of the type the agent declares, as an --agent-file's params are read
        spec["params"] = typed_params(spec["name"], spec["params"])
    except ValueError as err:
        raise CLIError(f"{agent_where(text)}: {err}") from None
    try:
        check_spec(spec, agent_where(text))
    except ConfigError as err:
        raise CLIError(str(err)) from None
    return spec


def read_spec_file(path: Path) -> dict[str, Any]:
    """An ``--agent-file``/``--model-file`` spec (a YAML path or a bundled spec's bare name) as a spec
    dict, validated as :func:`~shortcut_gym.agents.registry.read_agent_spec` does; faults name the file."""
    try:
        return read_agent_spec(path).as_dict()
    except ConfigError as err:
        raise CLIError(str(err)) from None


def built_once(spec: dict[str, Any], where: str) -> dict[str, Any]:
    """``spec`` after building its agent once, so what the constructor refuses (a value out of range,
    a missing model file) is told naming ``where`` (the option's text or the spec file)."""
    try:
        agent_from_spec(spec, source=where)
    except ConfigError as err:
        raise CLIError(str(err)) from None
    return spec


def add_agent_options(p: argparse.ArgumentParser, what: str = "agent (repeatable)") -> None:
    """``--agent TEXT`` and ``--agent-file YAML`` (both repeatable, used in the order given)."""
    p.add_argument("--agent", action="append", default=None,
                   help=f"{what} as {SYNTAX}; values are YAML scalars (numbers, true/false, text, paths, "
                        "lists as [a, b]), e.g. ppo:model_path=out/ppo.zip,deterministic=true")
    p.add_argument("--agent-file", action="append", default=None, type=Path,
                   help="agent spec YAML (name, label, params, options beside them, and for ppo/a2c/dqn "
                        "hyperparameters:; docs/configs.md; or a bundled spec's name such as learn_first_k; "
                        "repeatable, after the --agent agents)")


def agent_specs_of(args: argparse.Namespace, default: list[str] | None = None,
                   refuse: Callable[[list[tuple[dict[str, Any], str]]], None] | None = None) -> list[dict[str, Any]]:
    """The agent specs of ``--agent`` then ``--agent-file`` (or ``default`` texts when neither is given),
    read, passed to ``refuse`` as (spec, how a fault names it) pairs (a subcommand's own refusals, before
    anything is loaded), checked for repeated labels, then each built once so that any fault names its
    option text or file."""
    texts = args.agent if args.agent or args.agent_file else default
    read = [(parse_agent_arg(t), agent_where(t), f"--agent {t!r}") for t in texts or []]
    read += [(read_spec_file(path), str(path), f"--agent-file {path}") for path in args.agent_file or []]
    if refuse is not None:
        refuse([(spec, where) for spec, where, _ in read])
    from shortcut_gym.lab.simulate import label_of  # the label results are keyed by

    seen: dict[str, str] = {}
    for spec, _, source in read:
        label = label_of(spec)
        if label in seen:  # two agents under one label would be merged in every table
            raise CLIError(f"{seen[label]} and {source} both give the agent label {label!r}; results are keyed by "
                           "label: give one of them another (label=name:... on the line, label: in a file)")
        seen[label] = source
    specs = [built_once(spec, where) for spec, where, _ in read]
    for spec in specs:
        detail("agent " + ", ".join(f"{k}={v}" for k, v in spec.items()))
    return specs


#: The options of :func:`add_world_options`.
WORLD_OPTIONS = ("--scenario", "--costs", "--memory", "--schedule", "--sessions")


def add_world_options(p: argparse.ArgumentParser, sessions: bool = True) -> None:
    """The study's world options (scenario, costs, memory, schedule), the same on every subcommand
    that reads or simulates trials."""
    p.add_argument("--scenario", default=None, help="scenario preset name or YAML path (default: demo)")
    p.add_argument("--costs", default=None, help="cost preset name or YAML path")
    p.add_argument("--memory", default=None, help="memory settings YAML path or preset name")
    p.add_argument("--schedule", type=input_file, default=None,
                   help="YAML file of schedule settings (sessions, trials_per_session, trial_interval_s, gap_h)")
    if sessions:
        p.add_argument("--sessions", type=whole_number(1), default=None,
                       help="sessions per user (default: the scenario's or --schedule's)")


#: The ``sessions`` field of :class:`ScheduleSettings` alone: a ``--schedule`` file's own value, checked
#: as the whole schedule checks it when ``--sessions`` replaces it.
_ScheduleSessions = create_model("ScheduleSessions", __base__=StrictModel,
                                 sessions=(int, ScheduleSettings.model_fields["sessions"]))


def world_of(args: argparse.Namespace) -> World:
    """The :class:`~shortcut_gym.envs.world.World` the options of :func:`add_world_options` name."""
    schedule: dict[str, Any] = {}
    if getattr(args, "schedule", None) is not None:
        data = read_yaml(args.schedule)
        if not isinstance(data, dict):
            raise CLIError(f"--schedule {args.schedule}: must hold a mapping of schedule settings, got {data!r}")
        schedule.update(data)
    file_keys = set(schedule)
    sessions = getattr(args, "sessions", None)
    if sessions is not None:
        if "sessions" in file_keys:  # replaced, but a bad value in the file is still the file's fault
            validate(_ScheduleSessions, {"sessions": schedule["sessions"]}, str(args.schedule))
        schedule["sessions"] = sessions
    scenario = load_settings(ScenarioSettings, args.scenario or DEFAULT_SCENARIO)  # its faults name its file
    check_gap_count(args, scenario, schedule, file_keys)
    if file_keys:  # the file's faults name the file, as the other settings files' do
        validate(ScheduleSettings, {**scenario.schedule.model_dump(), **schedule}, str(args.schedule))
    world = make_world(scenario, args.costs, args.memory, schedule or None)
    detail(world_words(world, args))
    return world


def refuse_planner_world(world: World, who: str) -> None:
    """Refuse up front, before any computation, a world the planner cannot plan for when ``who``
    (a subcommand, or a subcommand's option naming an agent) needs the planner (one wording:
    :func:`~shortcut_gym.agents.planner.memory_model.planner_memory_refusal`)."""
    refusal = planner_memory_refusal(world, who)
    if refusal is not None:
        raise CLIError(refusal)


def refuse_planner_agents(world: World, command: str, option: str, named: Iterable[tuple[str, str]]) -> None:
    """:func:`refuse_planner_world` for each (text as given, registered agent name) of ``named`` whose
    agent acts on the planner's plan (``Agent.needs_planner``), named as ``command option 'text'``."""
    for text, name in named:
        cls = AGENTS.get(name)
        if cls is not None and cls.needs_planner:
            refuse_planner_world(world, f"{command} {option} {text!r}")


def spec_names(specs: Iterable[dict[str, Any]]) -> list[tuple[str, str]]:
    """(label or name, name) of agent spec dicts, for :func:`refuse_planner_agents`."""
    return [(str(s.get("label") or s["name"]), str(s["name"])) for s in specs]


def _scenario_source(args: argparse.Namespace) -> tuple[str, Path | None]:
    """How to name the scenario the options chose, and its file when it is the user's own."""
    name = args.scenario or DEFAULT_SCENARIO
    path = Path(name)
    if path.suffix in (".yaml", ".yml") or path.exists():
        return f"the schedule of --scenario {path}", path
    return f"the schedule of the scenario preset {name!r}", None


def check_gap_count(args: argparse.Namespace, scenario: ScenarioSettings, schedule: dict[str, Any],
                    file_keys: set[str]) -> None:
    """Refuse a ``gap_h`` list whose length is not sessions - 1 once the files and options are combined,
    naming the file the list came from, what set the number of sessions, and the ways to fix it.

    ``schedule`` holds the ``--schedule`` file's keys (``file_keys``) with ``--sessions`` laid over them;
    values of the wrong type are left to the schedule's own validation.
    """
    gaps = schedule.get("gap_h", scenario.schedule.gap_h)
    sessions = schedule.get("sessions", scenario.schedule.sessions)
    if not isinstance(gaps, list) or not isinstance(sessions, int) or isinstance(sessions, bool):
        return
    if len(gaps) == sessions - 1:
        return
    schedule_file = getattr(args, "schedule", None)
    scenario_words, scenario_file = _scenario_source(args)
    list_from_schedule = "gap_h" in file_keys
    if list_from_schedule:
        list_words, list_file = f"--schedule {schedule_file}", schedule_file
    else:
        list_words, list_file = scenario_words, scenario_file
    matching, needed = len(gaps) + 1, f"{sessions - 1} gap{'' if sessions == 2 else 's'}"
    if getattr(args, "sessions", None) is not None:
        sessions_words = f"--sessions {sessions}"
        fix = f"give --sessions {matching} to match the list"
    else:
        in_file = "sessions" in file_keys
        sessions_words = f"sessions: {sessions} in " + (f"--schedule {schedule_file}" if in_file else scenario_words)
        sessions_file = schedule_file if in_file else scenario_file
        also = f" (or set sessions: {matching} in {sessions_file})" if sessions_file is not None else ""
        fix = f"give --sessions {matching}{also} to match the list"
    if list_from_schedule:
        edit = f"edit gap_h in {list_file} to list {needed}"
    else:  # a scenario file's schedule must hold together on its own
        edit = f"give --schedule with a gap_h of {needed}" + (
            f", or edit the schedule in {list_file} to sessions: {sessions} with a gap_h of {needed}"
            if list_file is not None else "")
    listed = f"{len(gaps)} gap{'' if len(gaps) == 1 else 's'}"
    made = f"{sessions} session{'' if sessions == 1 else 's'}"
    raise CLIError(f"gap_h in {list_words} lists {listed} between sessions, but {sessions_words} makes {made}, "
                   f"which need {needed}; {fix}, or {edit}")


def world_words(world: World, args: argparse.Namespace) -> str:
    """One line naming the world a subcommand ran on (for its index.md)."""
    parts = [f"scenario {args.scenario or world.scenario.name}", f"costs {args.costs or 'default'}",
             f"memory {args.memory or 'default'}", f"schedule {args.schedule or 'of the scenario'}"]
    if getattr(args, "sessions", None) is not None:
        parts.append(counted(args.sessions, "session"))
    return "World: " + ", ".join(parts) + f" ({world.horizon} trials per simulated participant)."


def add_overwrite(p: argparse.ArgumentParser) -> None:
    """The ``--overwrite`` option of the subcommands that write an output folder or file."""
    p.add_argument("--overwrite", action="store_true",
                   help="write into an output folder (or over an output file) that already holds files")


def claim_output(path: Path | None, args: argparse.Namespace, option: str = "--out") -> None:
    """Refuse an output folder that holds files, or an output file that exists, unless --overwrite."""
    if path is None or getattr(args, "overwrite", False):
        return
    if path.is_dir() and any(path.iterdir()):
        raise CLIError(f"{option} {path}: the folder already holds files; give --overwrite to write into it "
                       "anyway, or choose a new folder")
    if path.is_file():
        raise CLIError(f"{option} {path}: the file exists; give --overwrite to replace it")


def add_common(p: argparse.ArgumentParser, models: bool = True, fitting: bool = True) -> None:
    """Options shared by the analysis subcommands; ``fitting`` adds ``--intervals`` and
    ``--start-range`` (for the subcommands that pass them to their fits)."""
    add_world_options(p)
    if models:
        add_model_options(p)
    p.add_argument("--starts", type=whole_number(1), default=10, help="optimiser starts per participant x model")
    p.add_argument("--seed", type=seed, default=0, help="seed of the random starts (and simulations)")
    p.add_argument("--jobs", type=whole_number(1), default=1, help="worker processes")
    p.add_argument("--out", type=output_folder, required=True, help="output folder (created)")
    add_overwrite(p)
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    if not fitting:
        return
    p.add_argument("--intervals", choices=INTERVAL_METHODS, default="wald",
                   help="95%% intervals: 'wald' (from the standard errors of the observed information), 'profile' "
                        "(profile likelihood, slower) or 'none' (no standard errors)")
    p.add_argument("--start-range", action="append", default=None, metavar="LABEL:PARAM=LOW:HIGH",
                   help="plausible range where the random starts of a model's parameter are drawn (natural units; "
                        "default: the parameter's documented range), repeatable")


def add_skip_bad(p: argparse.ArgumentParser) -> None:
    """The ``--skip-bad-participants`` option of the subcommands that read a trial log."""
    p.add_argument("--skip-bad-participants", action="store_true",
                   help="leave out participants whose log rows have faults (each listed with its first fault) "
                        "and fit the rest, instead of stopping at the log's faults")


def add_log_fit_options(p: argparse.ArgumentParser, hierarchical_use: str, cross_validation_use: str) -> None:
    """The options of the subcommands that fit models to a trial log (``fit``, ``report``): the log,
    :func:`add_common`'s, ``--skip-bad-participants``, ``--prior``, ``--hierarchical`` with its
    ``--covariance`` and ``--cross-validate``, whose help ends with what the subcommand does with them."""
    p.add_argument("log", type=input_file, help="trial log (.csv or .parquet)")
    add_common(p)
    add_skip_bad(p)
    p.add_argument("--prior", action="append", default=None,
                   help="label:param=family:a:b (normal, beta, gamma, lognormal) for a MAP fit (repeatable)")
    p.add_argument("--hierarchical", action="store_true",
                   help="also fit each model hierarchically (EM, Gaussian group prior, Laplace per participant) "
                        "and " + hierarchical_use)
    p.add_argument("--covariance", choices=COVARIANCES, default=None,
                   help=f"group prior covariance of --hierarchical (default {COVARIANCES[0]})")
    p.add_argument("--cross-validate", action="store_true",
                   help="also score each model on held-out sessions (leave one session out) and "
                        + cross_validation_use)


#: Group prior covariances of ``--hierarchical`` (:func:`~shortcut_gym.lab.fitting.fit_hierarchical`), default first.
COVARIANCES = ("diagonal", "full")


def covariance_of(args: argparse.Namespace) -> str:
    """The ``--covariance`` of ``--hierarchical`` (its default when not given); giving it without
    ``--hierarchical`` is an error rather than ignored."""
    if args.covariance is not None and not args.hierarchical:
        raise CLIError(f"--covariance {args.covariance}: applies to the --hierarchical fit only; "
                       "add --hierarchical or drop --covariance")
    return args.covariance or COVARIANCES[0]


class LogFitInputs(NamedTuple):
    """What :func:`add_log_fit_options` names, read and checked (:func:`log_fit_inputs`)."""

    world: World
    specs: list[ModelSpec]
    priors: dict[str, dict]
    start_ranges: dict[str, dict[str, tuple[float, float]]]
    log: pd.DataFrame


def log_fit_inputs(args: argparse.Namespace) -> LogFitInputs:
    """Claim ``--out``, then read the world, the models, their priors and start ranges (so a
    mistyped option fails before the log is read) and the log, reporting the participants
    ``--skip-bad-participants`` left out."""
    covariance_of(args)  # a stray --covariance fails before --out is claimed
    claim_output(args.out, args)
    world = world_of(args)
    specs = models_of(args)
    refuse_planner_agents(world, args.command, "--model", [(s.label, s.name) for s in specs])
    priors = priors_of(args.prior, specs)
    ranges = start_ranges_of(args.start_range, specs)
    log = read_log(args.log, world.commands, args.skip_bad_participants)
    report_skipped(log)
    detail(f"log {args.log}: {counted(len(log), 'trial')} of {counted(log['participant'].nunique(), 'participant')}")
    detail(f"output folder {args.out}")
    return LogFitInputs(world, specs, priors, ranges, log)


def report_skipped(log: pd.DataFrame) -> None:
    """Warn (stderr) of the participants a ``--skip-bad-participants`` read left out, with their first fault."""
    skipped = log.attrs.get("skipped_participants") or {}
    if skipped:
        warn(f"skipped {len(skipped)} participant(s) with faulty rows:")
        for pid, fault in skipped.items():
            warn(f"  {pid!r}: {fault}")


def models_of(args: argparse.Namespace, default: list[str] | None = None) -> list[ModelSpec]:
    """The ``--model`` lines then the ``--model-file`` specs (or ``default`` lines when neither is
    given); at least one, with unique labels."""
    files = getattr(args, "model_file", None) or []
    texts = args.model if args.model or files else default
    specs = [parse_model(m) for m in texts or []] + [read_model_file(path) for path in files]
    if not specs:
        raise CLIError(f"{args.command}: give at least one --model or --model-file")
    for spec in specs:
        detail(f"model {spec.label or spec.name}: {spec.name}, options {dict(spec.options)}, fixed {dict(spec.fixed)}")
    labels = [s.label for s in specs]
    dup = {lab for lab in labels if labels.count(lab) > 1}
    if dup:
        raise CLIError(f"model labels repeat: {sorted(dup)} (--model and --model-file); name them label=agent:... "
                       "on the line, label: in a file")
    return specs


def start_ranges_of(texts: list[str] | None, specs: list[ModelSpec]) -> dict[str, dict[str, tuple[float, float]]]:
    """``--start-range label:param=low:high`` -> {label: {param: (low, high)}}, checked against the models."""
    out: dict[str, dict[str, tuple[float, float]]] = {}
    by_label = {s.label: s for s in specs}
    for text in texts or []:
        label, colon, rest = text.partition(":")
        name, eq, pair = rest.partition("=")
        bounds = pair.split(":")
        if not colon or not eq or label not in by_label or len(bounds) != 2:
            raise CLIError(f"--start-range {text!r} must look like label:param=low:high with a label from "
                           f"{sorted(by_label)}")
        if name not in by_label[label].free_parameters():
            raise CLIError(f"--start-range {text!r}: {label} has no free parameter {name!r}; free: "
                           f"{by_label[label].free_parameters()}")
        try:
            low, high = float(bounds[0]), float(bounds[1])
        except ValueError:
            raise CLIError(f"--start-range {text!r}: {bounds[0]!r} and {bounds[1]!r} must be numbers") from None
        spec = by_label[label].build().param_specs()[name]
        if not (low <= high and spec.lower <= low and high <= spec.upper):
            raise CLIError(f"--start-range {text!r}: need low <= high within the bounds [{spec.lower}, {spec.upper}]")
        out.setdefault(label, {})[name] = (low, high)
    return out


def priors_of(texts: list[str] | None, specs: list[ModelSpec]) -> dict[str, dict]:
    """``--prior label:param=family:a:b`` -> {label: {param: distribution}}."""
    out: dict[str, dict] = {}
    labels = {s.label for s in specs}
    for text in texts or []:
        label, colon, rest = text.partition(":")
        if not colon or label not in labels:
            raise CLIError(f"--prior {text!r} must start with a model label from {sorted(labels)} and ':'")
        name, dist = parse_prior(rest)  # raises CLIError naming the text
        out.setdefault(label, {})[name] = dist
    return out
