"""``report``'s posterior-predictive figure and words: blocks numbered as in predictive_group.csv
(from 0), integer ticks, and a band from too few replicates called rough with their number."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.lab.checks.predictive import (
    MAX_BLOCK_TICKS,
    ROUGH_BAND_REPLICATES,
    band_words,
    block_ticks,
    predictive_figure,
)
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.report.analysis import predictive_words


def _section(index: str, heading: str) -> str:
    return index.split(f"## {heading}\n", 1)[1].split("\n## ", 1)[0]


@pytest.mark.parametrize("block", ["session", "10"])
def test_figure_blocks_are_the_csv_blocks_and_a_two_replicate_band_is_rough(tmp_path: Path, block: str) -> None:
    log = tmp_path / "log.csv"
    assert main(["simulate", "--agent", "rescorla_wagner:alpha=0.4,beta=2", "--users", "2", "--sessions", "3",
                 "--seed", "4", "--log", str(log), "--out", str(tmp_path / "sim")]) == 0
    out = tmp_path / "rep"
    assert main(["report", str(log), "--sessions", "3", "--model", "rescorla_wagner", "--model", "choice_kernel",
                 "--starts", "1", "--sims", "2", "--seed", "3", "--block", block, "--out", str(out), "--quiet"]) == 0
    group = pd.read_csv(out / "predictive_group.csv")
    blocks = sorted(group["block"].unique().tolist())
    expected_blocks = 3 if block == "session" else 3 * 40 // 10  # 40 trials per session in the demo scenario
    assert blocks == list(range(expected_blocks))
    assert (group["replicates"] == 2).all()
    fig = predictive_figure(group)
    axes = [ax for ax in fig.axes if ax.get_title()]
    assert [ax.get_title() for ax in axes] == ["rescorla_wagner", "choice_kernel"]
    for ax in axes:
        g = group[group["model"] == ax.get_title()]
        ticks = ax.get_xticks()
        assert np.array_equal(ticks, np.round(ticks)) and set(ticks.astype(int)) <= set(blocks)
        assert [t.get_text() for t in ax.get_xticklabels()] == [str(int(t)) for t in ticks]
        assert len(blocks) <= MAX_BLOCK_TICKS and list(ticks.astype(int)) == blocks  # every block, from 0
        data_line = next(line for line in ax.lines if line.get_label() == "data")
        assert np.array_equal(data_line.get_xdata(), g["block"].to_numpy())  # the plot's x is the CSV's block
        assert np.allclose(data_line.get_ydata(), g["data_mean"].to_numpy())
    legend = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert "model 90% band (rough: 2 replicates)" in legend
    words = _section((out / "index.md").read_text(), "Posterior-predictive check")
    assert "**The band is rough:** it rests on 2 replicates" in words
    assert "numbered from 0, as in `predictive_group.csv`" in words
    assert (out / "predictive.png").stat().st_size > 0


@pytest.mark.parametrize("n_sims", [1, 2, 5, 19, 20, 21, 50, 200])
def test_the_band_is_called_rough_exactly_below_twenty_replicates(n_sims: int) -> None:
    words = predictive_words("session", n_sims, 0.9)
    label = band_words(0.9, n_sims)
    rough = n_sims < ROUGH_BAND_REPLICATES
    assert ("The band is rough" in words) == rough and ("rough:" in label) == rough
    if rough:
        noun = "replicate" if n_sims == 1 else "replicates"
        assert f"rests on {n_sims} {noun} " in words and label == f"model 90% band (rough: {n_sims} {noun})"
    else:
        assert label == "model 90% band" and f"{n_sims} simulations" in words


@pytest.mark.parametrize("n_blocks", [1, 2, 5, 12, 13, 24, 25, 40, 137])
def test_block_ticks_are_whole_blocks_from_zero_and_never_crowded(n_blocks: int) -> None:
    ticks = block_ticks(range(n_blocks))
    assert ticks[0] == 0 and all(isinstance(t, int) for t in ticks)
    assert set(ticks) <= set(range(n_blocks)) and len(ticks) <= MAX_BLOCK_TICKS
    if n_blocks <= MAX_BLOCK_TICKS:
        assert ticks == list(range(n_blocks))
    steps = set(np.diff(ticks).tolist())
    assert len(steps) <= 1  # evenly spaced
