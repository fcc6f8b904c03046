"""Plots of the design studies, drawn with matplotlib's object API (no pyplot, no backend switch)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator


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
            raise ValueError(f"budget curve lacks column {col!r}; has {list(curve.columns)}")
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
