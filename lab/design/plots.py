"""Plots of the design studies, drawn with matplotlib's object API (no pyplot, no backend switch)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from shortcut_gym.envs.errors import DataError


def save_figure(fig: Figure, path: Path) -> Path:
    """Write ``fig`` as PNG atomically (a temporary file renamed into place)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".tmp-{path.name}")
    FigureCanvasAgg(fig)
    fig.savefig(tmp, dpi=110, bbox_inches="tight", format="png")
    tmp.replace(path)
    return path


def budget_figure(curve: pd.DataFrame, title: str = "Hotkey assignment") -> Figure:
    """Expected seconds saved per user against the hotkey budget: exact optimum and heuristic."""
    for col in ("budget", "exact_saving_s", "heuristic_saving_s"):
        if col not in curve.columns:
            raise DataError(f"budget curve lacks column {col!r}; has {list(curve.columns)}")
    fig = Figure(figsize=(5.2, 3.4), constrained_layout=True)
    ax = fig.add_subplot()
    ax.plot(curve["budget"], curve["exact_saving_s"], marker="o", ms=4, label="exact (milp)")
    ax.plot(curve["budget"], curve["heuristic_saving_s"], ls="--", marker="x", ms=4, label="heuristic")
    ax.set_xlabel("hotkey budget B")
    ax.set_ylabel("time saved per user (s, whole horizon)")
    ax.set_title(title, fontsize=10)
    ax.set_ylim(bottom=0)
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.legend(fontsize=8)
    return fig


def aid_figure(table: pd.DataFrame, population: str, title: str = "Interface aids") -> Figure:
    """Seconds saved per user by each aid (bars, +- 1 SE) at each population value, one panel per agent."""
    for col in (population, "agent", "aid", "saved_s", "saved_se_s"):
        if col not in table.columns:
            raise DataError(f"aid table lacks column {col!r}; has {list(table.columns)}")
    agents = list(dict.fromkeys(table["agent"]))
    aids = list(dict.fromkeys(table["aid"]))
    values = list(dict.fromkeys(table[population]))
    fig = Figure(figsize=(max(5.0, 1.2 * len(values) * max(1, len(aids)) / 3 + 2), 2.6 * len(agents) + 0.6),
                 constrained_layout=True)
    axes = fig.subplots(len(agents), 1, squeeze=False)[:, 0]
    width = 0.8 / max(len(aids), 1)
    for ax, agent in zip(axes, agents, strict=True):
        part = table[table["agent"] == agent]
        for j, aid in enumerate(aids):
            rows = part[part["aid"] == aid].set_index(population).reindex(values)
            x = [i + (j - (len(aids) - 1) / 2) * width for i in range(len(values))]
            ax.bar(x, rows["saved_s"], width, yerr=rows["saved_se_s"], label=aid, capsize=2)
        ax.axhline(0.0, color="black", lw=0.8)
        ax.set_xticks(range(len(values)), [str(v) for v in values], fontsize=8)
        ax.set_ylabel("saved per user (s)")
        ax.set_title(agent, fontsize=9)
    axes[-1].set_xlabel(population)
    axes[0].legend(fontsize=7, ncol=min(len(aids), 5))
    fig.suptitle(title, fontsize=10)
    return fig
