"""Everything that needs the planner's plan refuses a world whose memory kind the planner does not
model (spacing-sensitive decay, ``pavlik_anderson``) up front, with one wording naming the memory
kind, who refused and why; the same commands on a world with a modelled memory kind run.

"Up front" is checked with tripwires: the hot paths (env and batched steps, fits, the yardstick's
per-participant work, planning, sweep runs) raise if reached, so a refusal that comes after any
of them fails the test with that tripwire's message instead of the refusal."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from shortcut_gym.agents.base import AgentContext
from shortcut_gym.agents.planner.memory_model import (
    PLANNER_MEMORY_REASON,
    SUPPORTED_KINDS,
    PlannerMemoryError,
    planner_memory_refusal,
)
from shortcut_gym.agents.registry import AGENTS, make_agent
from shortcut_gym.agents.rollout import context_of_world
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.memory import MemoryKind
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.cli import main

#: One short session: 10 trials.
TINY = {"sessions": 1, "trials_per_session": 10, "trial_interval_s": 45.0, "gap_h": 24.0}
#: Cheap planner agents.
PLANNER = "bo=bounded_optimal:n_bins=4,n_weight_bins=1,select_users=0"
CHOOSER = "pc=planned_choice:n_bins=4,n_weight_bins=1"
SPACING = {"kind": "pavlik_anderson", "spacing_scale": 0.217, "spacing_intercept": 0.177, "gap_time_scale": 0.025}
MODELLED = {"kind": "actr", "gap_time_scale": 0.025}

#: case -> (argv with WORLD for the world options, LOG, OUT, STUDY, SWEEP, POPULATION; who the message names
#: first, STUDY and SWEEP standing for the spacing world's file).
CASES: dict[str, tuple[list[str], str]] = {
    "score": (["score", "WORLD", "--agent", "always_menu", "--users", "1"], "score"),
    "yardstick": (["yardstick", "LOG", "WORLD", "--starts", "1", "--plan-bins", "4", "--plan-weight-bins", "1",
                   "--optimum-sims", "1", "--out", "OUT", "--quiet"], "yardstick"),
    "report --rationality": (["report", "LOG", "WORLD", "--model", "static_softmax", "--model", "random",
                              "--rationality", "--starts", "1",
                              "--sims", "1", "--intervals", "none", "--plan-bins", "4", "--plan-weight-bins", "1",
                              "--optimum-sims", "1", "--out", "OUT", "--quiet"], "report --rationality"),
    "report --model planned_choice": (["report", "LOG", "WORLD", "--model", CHOOSER, "--model", "static_softmax",
                                       "--starts", "1", "--sims", "1", "--intervals", "none", "--out", "OUT",
                                       "--quiet"], "report --model 'pc'"),
    "allot": (["allot", "WORLD", "--budget", "1", "--pool", "1,1,0", "--bins", "4"],
              "allot (it prices every command by the planner; --agent prices by simulation)"),
    "allot --agent": (["allot", "WORLD", "--budget", "1", "--pool", "1,1,0", "--agent", "always_menu", "--agent",
                       PLANNER, "--users", "1"], "allot --agent 'bo'"),
    "aids": (["aids", "STUDY", "--users", "1"], "STUDY: agent 'bo' at memory.kind='pavlik_anderson'"),
    "sweep": (["sweep", "SWEEP", "--out", "OUT", "--workers", "1", "--quiet", "--plan-folder", "none"],
              "sweep spec 'sweep_spacing': vary point 0 (memory.kind='pavlik_anderson'): agent 'bo'"),
    "sweep --plan-only": (["sweep", "SWEEP", "--plan-only"],
                          "SWEEP: vary point 0 (memory.kind='pavlik_anderson'): agent 'bo'"),
    "simulate bounded_optimal": (["simulate", "WORLD", "--agent", "always_menu", "--agent", PLANNER, "--users", "1"],
                                 "simulate --agent 'bo'"),
    "simulate planned_choice": (["simulate", "WORLD", "--agent", CHOOSER, "--users", "1"], "simulate --agent 'pc'"),
    "simulate --population": (["simulate", "WORLD", "--population", "POPULATION", "--log", "OUT/pop.csv"],
                              "simulate --population 'pc'"),
    "fit planned_choice": (["fit", "LOG", "WORLD", "--model", "static_softmax", "--model", CHOOSER, "--starts", "1",
                            "--intervals", "none", "--out", "OUT", "--quiet"], "fit --model 'pc'"),
    "recover planned_choice": (["recover", "WORLD", "--model", CHOOSER, "--participants", "2", "--study",
                                "parameters", "--starts", "1", "--out", "OUT", "--quiet"], "recover --model 'pc'"),
}


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    """World files for both memories, a small trial log, and per memory an aid study, a sweep spec and a
    population spec with a planner agent."""
    root = tmp_path_factory.mktemp("planner_memory")
    paths = {"tiny": root / "tiny.yaml", "log": root / "log.csv"}
    paths["tiny"].write_text(yaml.safe_dump(TINY))
    for tag, memory in (("spacing", SPACING), ("modelled", MODELLED)):
        paths[f"memory_{tag}"] = root / f"memory_{tag}.yaml"
        paths[f"memory_{tag}"].write_text(yaml.safe_dump(memory))
        base = {"scenario": "tidepool_logbook", "schedule": dict(TINY)}
        paths[f"study_{tag}"] = root / f"study_{tag}.yaml"
        paths[f"study_{tag}"].write_text(yaml.safe_dump({
            "name": f"study_{tag}", "base": base, "aids": {"nudge": "nudge"},
            "population": {"path": "memory.kind", "values": [memory["kind"]]},
            "agents": [{"name": "always_menu"},
                       {"name": "bounded_optimal", "label": "bo", "n_bins": 4, "n_weight_bins": 1, "select_users": 0}],
            "users": {"first": 0, "count": 1}, "threads": 1}))
        paths[f"sweep_{tag}"] = root / f"sweep_{tag}.yaml"
        paths[f"sweep_{tag}"].write_text(yaml.safe_dump({
            "name": f"sweep_{tag}", "base": base,
            "vary": {"design": "grid", "parameters": {"memory.kind": {"values": [memory["kind"]]}}},
            "agents": [{"name": "always_menu"},
                       {"name": "bounded_optimal", "label": "bo", "n_bins": 4, "n_weight_bins": 1, "select_users": 0}],
            "seeds": {"first": 0, "count": 1}}))
    paths["population"] = root / "population.yaml"
    paths["population"].write_text(yaml.safe_dump({"models": {"pc": {
        "agent": "planned_choice", "options": {"n_bins": 4, "n_weight_bins": 1}, "participants": 1}}}))
    assert main(["-q", "simulate", "--agent", "learn_first_k:k=1", "--users", "1", "--schedule", str(paths["tiny"]),
                 "--log", str(paths["log"])]) == 0
    return paths


def _argv(case: str, tag: str, files: dict[str, Path], out: Path) -> list[str]:
    argv, _ = CASES[case]
    world = ["--schedule", str(files["tiny"]), "--memory", str(files[f"memory_{tag}"])]
    swap = {"LOG": [str(files["log"])], "OUT": [str(out)], "STUDY": [str(files[f"study_{tag}"])],
            "SWEEP": [str(files[f"sweep_{tag}"])], "POPULATION": [str(files["population"])], "WORLD": world}
    return [x for a in argv for x in (swap[a] if a in swap else [str(out) + a[3:]] if a.startswith("OUT/") else [a])]


def _tripwires(monkeypatch: pytest.MonkeyPatch) -> None:
    """Make every long computation raise if reached."""
    import shortcut_gym.agents.planner.cache as cache
    import shortcut_gym.lab.design.assignment as assignment
    import shortcut_gym.lab.fitting.runner as runner
    import shortcut_gym.lab.rationality.analysis as analysis
    import shortcut_gym.lab.sweep.run as sweep_run
    from shortcut_gym.envs.env import CommandSelectionEnv
    from shortcut_gym.envs.simulator import BatchSimulator

    def wire(what: str):
        def fire(*args, **kwargs):
            raise AssertionError(f"{what} ran before the memory kind was refused")
        return fire

    monkeypatch.setattr(CommandSelectionEnv, "step", wire("an env step"))
    monkeypatch.setattr(BatchSimulator, "step", wire("a batched step"))
    monkeypatch.setattr(runner, "fit_participant", wire("a fit"))
    monkeypatch.setattr(analysis, "_participant", wire("the yardstick's participant work"))
    monkeypatch.setattr(assignment, "build_command_mdp", wire("allot's planning"))
    monkeypatch.setattr(cache, "plan_world", wire("planning"))
    monkeypatch.setattr(sweep_run, "compute_run", wire("a sweep run"))


@pytest.mark.parametrize("case", list(CASES))
def test_refused_up_front_with_one_wording(case: str, files, tmp_path: Path, capsys, monkeypatch) -> None:
    _tripwires(monkeypatch)
    out = tmp_path / "out"
    capsys.readouterr()
    code = main(_argv(case, "spacing", files, out))
    err = capsys.readouterr().err
    assert code == 2, err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in err, err
    who = CASES[case][1].replace("STUDY", str(files["study_spacing"])).replace("SWEEP", str(files["sweep_spacing"]))
    assert lines[0] == (f"shortcut-gym {case.split()[0]}: error: {who}: memory kind 'pavlik_anderson' is refused: "
                        f"{PLANNER_MEMORY_REASON}"), err
    assert not out.exists() or not any(out.iterdir()), f"{case} wrote {sorted(out.iterdir())} before refusing"


@pytest.mark.parametrize("case", list(CASES))
def test_the_same_commands_run_on_a_modelled_memory(case: str, files, tmp_path: Path, capsys) -> None:
    capsys.readouterr()
    code = main(["-q", *_argv(case, "modelled", files, tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 0, err
    assert "is refused" not in err


# ---- the library ----------------------------------------------------------------------------------
def _world(kind: str):
    memory = SPACING if kind == "pavlik_anderson" else {"kind": kind}
    return make_world(memory=memory, schedule=dict(TINY))


def test_the_refusal_follows_the_supported_kinds_over_every_memory_kind() -> None:
    """Every memory kind of the world: refused exactly when the planner does not model it, naming it."""
    kinds = MemoryKind.__args__  # type: ignore[attr-defined]
    assert set(SUPPORTED_KINDS) < set(kinds)
    for kind in kinds:
        refusal = planner_memory_refusal(_world(kind), "someone")
        if kind in SUPPORTED_KINDS:
            assert refusal is None, kind
        else:
            assert refusal == f"someone: memory kind {kind!r} is refused: {PLANNER_MEMORY_REASON}"


@pytest.mark.parametrize("name", sorted(n for n, cls in AGENTS.items() if cls.needs_planner))
def test_planner_agents_refuse_when_built_bound_or_prepared(name: str) -> None:
    spacing = _world("pavlik_anderson")
    message = f"agent {name!r}: memory kind 'pavlik_anderson' is refused: {PLANNER_MEMORY_REASON}"
    options = {"n_bins": 4, "n_weight_bins": 1}
    with pytest.raises(PlannerMemoryError) as built:
        make_agent(name, world=spacing, **options)
    assert str(built.value) == message
    agent = make_agent(name, **options)
    with pytest.raises(PlannerMemoryError) as bound:
        agent.bind(context_of_world(spacing))
    assert str(bound.value) == message
    # a context set without bind (the constructor's) is refused where the plan is made
    agent = make_agent(name, context=AgentContext(12, 10, world=spacing), **options)
    with pytest.raises(PlannerMemoryError) as prepared:
        agent.prepare()
    assert str(prepared.value) == message
    assert isinstance(prepared.value, ConfigError)


@pytest.mark.parametrize("kind", SUPPORTED_KINDS)
def test_planner_agents_build_and_plan_for_every_modelled_kind(kind: str) -> None:
    world = _world(kind)
    for name in (n for n, cls in AGENTS.items() if cls.needs_planner):
        agent = make_agent(name, n_bins=4, n_weight_bins=1)
        agent.bind(context_of_world(world))
        agent.prepare()
        agent.reset(0)


def test_only_the_planner_agents_need_the_planner() -> None:
    assert {n for n, cls in AGENTS.items() if cls.needs_planner} == {"bounded_optimal", "planned_choice"}


def test_library_calls_refuse_before_computing(files, monkeypatch) -> None:
    from shortcut_gym.agents.scoring import time_lost_vs_planner
    from shortcut_gym.lab.data.logs import read_log
    from shortcut_gym.lab.design.assignment import planner_savings, population_savings
    from shortcut_gym.lab.fitting.runner import fit_log
    from shortcut_gym.lab.fitting.specs import ModelSpec
    from shortcut_gym.lab.rationality import rationality_analysis
    from shortcut_gym.lab.simulate import simulate_agents

    _tripwires(monkeypatch)
    world = _world("pavlik_anderson")
    log = read_log(files["log"], world.commands)
    chooser = ModelSpec("planned_choice", "pc", {"n_bins": 4, "n_weight_bins": 1})
    calls = {
        "time_lost_vs_planner": lambda: time_lost_vs_planner(world, {"m": make_agent("always_menu")}, [0]),
        "planner_savings": lambda: planner_savings(world, n_bins=4),
        "population_savings: agent 'bounded_optimal'": lambda: population_savings(
            world, [{"name": "always_menu"}, {"name": "bounded_optimal"}], seeds=[0]),
        "simulate_agents: agent 'bounded_optimal'": lambda: simulate_agents(
            world, [{"name": "always_menu"}, {"name": "bounded_optimal"}], [0]),
        "fit_log: agent 'pc'": lambda: fit_log(log, [ModelSpec("static_softmax"), chooser], context_of_world(world)),
        "rationality_analysis": lambda: rationality_analysis(log, world),
    }
    for who, call in calls.items():
        with pytest.raises(PlannerMemoryError) as refused:
            call()
        assert str(refused.value) == f"{who}: memory kind 'pavlik_anderson' is refused: {PLANNER_MEMORY_REASON}"
