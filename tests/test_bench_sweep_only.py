"""``scripts/bench_sweep.py --families-only --only TEXT``: which parts run. Part A times the families
whose name contains a TEXT, part B (the held-out style sweep) runs for ``sweep``, part C (planned
choice batched vs per-user) runs whenever the planned_choice family is among those selected."""

from __future__ import annotations

import importlib.util
from pathlib import Path
from typing import Any

import pytest
from benchmarks import families

SCRIPT = Path(__file__).resolve().parents[1] / "scripts" / "bench_sweep.py"
PLANNED = next(name for name, spec, _ in families.FAMILIES if spec["name"] == "planned_choice")


@pytest.fixture
def calls(monkeypatch) -> list[tuple[str, Any]]:
    """The parts ``families.run`` calls, recorded instead of run (with part A's families)."""
    seen: list[tuple[str, Any]] = []

    def part_a(sessions, quick, sb3, out=print, only=()):
        seen.append(("A", [name for name, _, _ in families.FAMILIES if not only or any(o in name for o in only)]))

    monkeypatch.setattr(families, "part_families", part_a)
    monkeypatch.setattr(families, "part_heldout", lambda quick, out=print: seen.append(("B", None)))
    monkeypatch.setattr(families, "part_planned_choice",
                        lambda sessions, quick, out=print: seen.append(("C", None)))
    return seen


def _script() -> Any:
    spec = importlib.util.spec_from_file_location("bench_sweep_script", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _expected(only: tuple[str, ...]) -> list[str]:
    """The parts for ``only``, from the family names themselves (a substring test per name)."""
    names = [name for name, _, _ in families.FAMILIES]
    chosen = [n for n in names if not only or any(o in n for o in only)]
    parts = ["A"] if chosen else []
    parts += ["B"] if not only or "sweep" in only else []
    parts += ["C"] if PLANNED in chosen else []
    return parts


CASES = [(), ("planner",), ("planned_choice",), ("choice",), ("planned",), ("bounded_optimal",), ("sweep",),
         ("sweep", "planner"), ("fixed",), ("random", "planned_choice"), ("learning",)]


@pytest.mark.parametrize("only", CASES)
def test_parts_follow_the_selected_families(calls, only: tuple[str, ...]) -> None:
    families.run(only=only, sb3=False)
    assert [part for part, _ in calls] == _expected(only)


@pytest.mark.parametrize("text", ["planner", "planned_choice", "choice", "planner: planned"])
def test_selecting_the_planned_choice_family_runs_part_c(calls, text: str) -> None:
    families.run(only=(text,), sb3=False)
    assert ("C", None) in calls
    assert PLANNED in dict(calls)["A"]


def test_the_script_runs_part_c_for_planner(calls) -> None:
    assert _script().main(["--families-only", "--only", "planner"]) == 0
    timed = dict(calls)["A"]
    assert [p for p, _ in calls] == ["A", "C"]
    assert timed == [n for n, _, _ in families.FAMILIES if "planner" in n] and PLANNED in timed


def test_the_help_says_what_only_matches(capsys) -> None:
    with pytest.raises(SystemExit):
        _script().main(["--help"])
    text = " ".join(capsys.readouterr().out.split())
    for name, _, _ in families.FAMILIES:
        assert name in text  # the names --only is matched against
    assert "part C" in text and "sweep" in text


@pytest.mark.parametrize("argv, words", [
    (["--families-only", "--only", "no_such_family"], "no_such_family"),
    (["--only", "planner"], "--families-only"),
])
def test_an_only_that_selects_nothing_is_refused(calls, capsys, argv: list[str], words: str) -> None:
    with pytest.raises(SystemExit) as stop:
        _script().main(argv)
    assert stop.value.code == 2 and words in capsys.readouterr().err
    assert calls == []
