"""``shortcut-gym bench``: the suites run from the installed package and print ratios (no timing asserts)."""

from __future__ import annotations

import importlib
import inspect
import math
import re

import pytest

from shortcut_gym.lab.cli import main
from shortcut_gym.lab.cli.bench import SUITES, chosen_suites

OURS = "shortcut_gym/CommandSelection-v0 (actr O(1))"


def _rows(text: str) -> dict[int, tuple[float, float, float]]:
    """Horizon -> (median, min, max) of the paired ratios to CartPole-v1 from our env's rows."""
    out = {}
    for line in text.splitlines():
        if line.startswith(OURS):
            horizon, _us, ratio, low, high = line[len(OURS):].split()
            out[int(horizon)] = (float(ratio), float(low), float(high))
    return out


def _ratios(text: str) -> dict[int, float]:
    """Horizon -> median ratio to CartPole-v1 from the env suite's rows for our env."""
    return {h: row[0] for h, row in _rows(text).items()}


def test_quick_env_suite_prints_a_positive_finite_ratio_per_horizon(capsys) -> None:
    assert main(["bench", "--suite", "env", "--quick"]) == 0
    captured = capsys.readouterr()
    text = captured.out
    assert "=== bench env (quick)" in text
    ratios = _ratios(text)
    assert sorted(ratios) == [100, 1_000]  # quick stops short of the 10,000-trial horizon
    for horizon, ratio in ratios.items():
        assert math.isfinite(ratio) and ratio > 0, (horizon, ratio)
    for horizon, (ratio, low, high) in _rows(text).items():
        assert low <= ratio <= high, (horizon, low, ratio, high)  # the median lies within the spread
    assert text.count("load average (1, 5, 15 min)") == 2  # before and after
    assert "took" not in text  # the wall time is status, on stderr
    took = re.search(r"=== bench env took ([0-9.]+) s", captured.err)
    assert took is not None and float(took.group(1)) > 0


def test_suite_lines_go_to_the_given_output_only(capsys) -> None:
    lines: list[str] = []
    importlib.import_module(SUITES["env"]).run(quick=True, out=lines.append)
    assert capsys.readouterr().out == ""
    header = next(line for line in lines if line.startswith("environment"))
    assert header.split() == ["environment", "horizon", "us/step", "ratio", "min", "max"]
    assert len(_ratios("\n".join(lines))) == 2


def test_unknown_suite_exits_2_naming_it_and_the_known_ones(capsys) -> None:
    assert main(["bench", "--suite", "env", "--suite", "warp_drive"]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""  # nothing ran, not even the valid suite
    assert "'warp_drive'" in captured.err
    for name in SUITES:
        assert name in captured.err


def test_suites_default_to_all_in_order_and_run_once_each() -> None:
    assert chosen_suites(None) == ["env", "agents", "fit", "sweep", "group"]
    assert chosen_suites(["fit", "env", "fit"]) == ["fit", "env"]


@pytest.mark.parametrize("name", list(SUITES))
def test_every_suite_module_takes_quick_and_out(name: str) -> None:
    params = inspect.signature(importlib.import_module(SUITES[name]).run).parameters
    assert list(params)[:2] == ["quick", "out"]


def test_env_suite_summary_pairs_blocks_and_takes_the_median_and_spread_of_their_ratios() -> None:
    env_suite = importlib.import_module(SUITES["env"])
    mine, theirs = [3.0, 10.0, 4.0, 8.0], [1.0, 2.0, 2.0, 8.0]  # paired ratios 3, 5, 2, 1
    ours, ref, ratio, low, high = env_suite.summary(mine, theirs)
    assert (ours, ref) == (6.0, 2.0)  # medians of each env's blocks
    assert (ratio, low, high) == (2.5, 1.0, 5.0)  # of the paired ratios, not the ratio of medians (3.0)
    with pytest.raises(ValueError, match="zip"):
        env_suite.summary([1.0], [1.0, 2.0])
