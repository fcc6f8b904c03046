"""Sweep plots: hotkey adoption curves, the break-even map, time saved against the planner."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure  # object API: no pyplot, the global backend is left alone

from shortcut_gym.lab.sweep.spec import SweepSpec
from shortcut_gym.lab.sweep.store import unique_suffix


def _save(fig: Any, path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".tmp-{path.name}.{unique_suffix()}")
    try:
        fig.savefig(tmp, dpi=110, bbox_inches="tight", format="png")
        tmp.replace(path)
    finally:
        tmp.unlink(missing_ok=True)
    return path


def adoption_plot(spec: SweepSpec, blocks: pd.DataFrame, path: Path) -> Path:
    """Share of trials done by hotkey per session, one line per agent, one panel per condition."""
    by = spec.outputs.adoption_by or (next(iter(spec.vary.parameters)) if spec.vary.parameters else None)
    levels = sorted(blocks[by].unique()) if by else [None]
    if len(levels) > 9:  # many random / LHS values: bin them
        bins = pd.qcut(blocks[by], 6, duplicates="drop")
        levels = [str(c) for c in bins.cat.categories]  # in increasing order
        blocks = blocks.assign(**{str(by): bins.astype(str)})
    n = len(levels)
    cols = min(n, int(np.ceil(np.sqrt(n))))
    rows = -(-n // cols)
    fig = Figure(figsize=(4.2 * cols, 3.2 * rows), constrained_layout=True)
    axes = fig.subplots(rows, cols, squeeze=False, sharey=True)
    for ax, level in zip(axes.ravel(), levels, strict=False):
        part = blocks if by is None else blocks[blocks[by] == level]
        curve = part.groupby(["agent", "session"])["hotkey_share"].mean().reset_index()
        for agent, g in curve.groupby("agent", sort=False):
            ax.plot(g["session"], g["hotkey_share"], marker="o", ms=3, label=agent)
        ax.set_title(f"{by} = {level:g}" if isinstance(level, float) else f"{by} = {level}" if by else "all runs",
                     fontsize=9)
        ax.set_xlabel("session")
        ax.set_ylim(-0.02, 1.02)
    for ax in axes.ravel()[n:]:
        ax.axis("off")
    axes[0, 0].set_ylabel("hotkey share of trials")
    axes[0, 0].legend(fontsize=7)
    fig.suptitle(f"{spec.name}: hotkey adoption (mean over users and other parameters)", fontsize=10)
    return _save(fig, path)


def break_even_plot(grid: dict[str, Any], path: Path) -> Path:
    """Simulated saving of learning over the menu, with the break-even rule's boundary overlaid
    (:func:`shortcut_gym.agents.planner.break_even_table`: its recall is the simulator's)."""
    xs, ys = np.asarray(grid["x"], float), np.asarray(grid["y"], float)
    sav = grid["simulated_saving_s"]
    fig = Figure(figsize=(6, 4.6))
    ax = fig.subplots()
    lim = float(np.nanmax(np.abs(sav))) if np.isfinite(sav).any() else 1.0
    mesh = ax.pcolormesh(_edges(xs), _edges(ys), sav, cmap="RdBu", vmin=-lim, vmax=lim, shading="flat")
    fig.colorbar(mesh, ax=ax, label=f"time saved per user on '{grid['command_name']}' (s)\n"
                                    f"{grid['learner']} vs {grid['menu']}")
    for i, y in enumerate(ys):
        for j, x in enumerate(xs):
            if np.isfinite(sav[i, j]):
                ax.text(x, y, "pays" if sav[i, j] > 0 else "no", ha="center", va="center", fontsize=7)
    fx, fy = np.asarray(grid["fine_x"], float), np.asarray(grid["fine_y"], float)
    pays = np.asarray(grid["fine_pays"], float)
    if 0 < pays.sum() < pays.size and len(fx) > 1 and len(fy) > 1:
        ax.contour(fx, fy, pays, levels=[0.5], colors="k", linewidths=2)
    ax.plot([], [], "k-", lw=2, label="break-even rule (recall from the simulator along learn-then-hotkey)")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.13), fontsize=7)
    for vals, setter in ((xs, ax.set_xscale), (ys, ax.set_yscale)):
        if _logish(vals):
            setter("log")
    ax.set_xlabel(grid["x_path"])
    ax.set_ylabel(grid["y_path"])
    ax.set_title("When learning the hotkey pays (blue) or not (red)", fontsize=10)
    return _save(fig, path)


def _logish(v: np.ndarray) -> bool:
    """Positive values spanning a factor of 10 or more are shown on a log axis."""
    return len(v) > 1 and bool(np.all(v > 0)) and float(v.max() / v.min()) >= 10.0


def _edges(v: np.ndarray) -> np.ndarray:
    if len(v) == 1:
        return np.array([v[0] * 0.9, v[0] * 1.1]) if v[0] != 0 else np.array([-0.5, 0.5])
    if _logish(v):
        return np.exp(_edges(np.log(v)))
    mid = (v[:-1] + v[1:]) / 2
    return np.r_[v[0] - (mid[0] - v[0]), mid, v[-1] + (v[-1] - mid[-1])]


def time_saved_plot(summary: pd.DataFrame, reference: str, path: Path) -> Path:
    """Per point: each agent's time saved over always-menu against the reference agent's saving."""
    fig = Figure(figsize=(5.4, 4.6))
    ax = fig.subplots()
    ref = summary[summary["agent"] == reference].set_index("point_index")["time_saved_vs_menu_s"]
    for agent, g in summary.groupby("agent", sort=False):
        if agent == reference:
            continue
        ax.scatter(g["point_index"].map(ref), g["time_saved_vs_menu_s"], s=14, label=agent)
    lo, hi = float(np.nanmin(ref)), float(np.nanmax(ref))
    ax.plot([lo, hi], [lo, hi], "k--", lw=1, label="as good as the reference")
    ax.axhline(0, color="grey", lw=0.5)
    ax.set_xlabel(f"time saved over always-menu by {reference} (s per user)")
    ax.set_ylabel("time saved over always-menu by the agent (s per user)")
    ax.legend(fontsize=7)
    ax.set_title("Time saved per agent against the planner, one dot per setting", fontsize=10)
    return _save(fig, path)


def write_plots(spec: SweepSpec, blocks: pd.DataFrame, summary: pd.DataFrame, grid: dict[str, Any] | None,
                folder: Path, roles: dict[str, str | None]) -> dict[str, Path]:
    """Every plot the data allows; returns name -> path."""
    out = {"adoption_plot": adoption_plot(spec, blocks, folder / "adoption.png")}
    if grid is not None:
        out["break_even_plot"] = break_even_plot(grid, folder / "break_even.png")
    if (roles["reference"] and roles["menu"] and not summary.empty
            and (summary["agent"] == roles["reference"]).any()):
        out["time_saved_plot"] = time_saved_plot(summary, roles["reference"], folder / "time_saved.png")
    return out
