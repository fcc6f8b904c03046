"""Report plots (PNG): model comparison, parameter recovery, model-recovery confusion matrix."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.lab.compare import BMSResult


def _figure(**kwargs: Any) -> Any:
    """A matplotlib ``Figure`` (object API: no pyplot, the global backend is left alone)."""
    from matplotlib.figure import Figure

    return Figure(**kwargs)


def plot_comparison(summed: pd.DataFrame, bms: BMSResult, path: Path) -> Path:
    """Summed BIC difference to the best model, and BMS expected frequency / protected exceedance."""
    fig = _figure(figsize=(9, 3.2))
    a1, a2 = fig.subplots(1, 2)
    a1.barh(summed["model"], summed["delta_bic"], color="C0")
    a1.set_xlabel("summed BIC - best summed BIC")
    a1.invert_yaxis()
    t = bms.table()
    x = np.arange(len(t))
    a2.bar(x - 0.2, t["expected_frequency"], 0.4, label="expected frequency")
    a2.bar(x + 0.2, t["protected_exceedance"], 0.4, label="protected exceedance")
    a2.set_xticks(x, t["model"], rotation=20, fontsize=8)
    a2.set_ylim(0, 1)
    a2.legend(fontsize=7)
    a2.set_title(f"random-effects BMS (BOR {bms.bor:.2f})", fontsize=9)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    return path


def plot_parameter_recovery(pairs: pd.DataFrame, summary: pd.DataFrame, path: Path) -> Path:
    """True vs fitted value per parameter, with the identity line and r in the title."""
    params = list(dict.fromkeys(pairs["parameter"]))
    fig = _figure(figsize=(3 * len(params), 3))
    axes = fig.subplots(1, len(params), squeeze=False)
    for ax, p in zip(axes[0], params, strict=True):
        d = pairs[pairs["parameter"] == p]
        ax.plot(d["true"], d["fitted"], "o", ms=3)
        lo, hi = float(min(d["true"].min(), d["fitted"].min())), float(max(d["true"].max(), d["fitted"].max()))
        ax.plot([lo, hi], [lo, hi], "k--", lw=0.8)
        r = summary.loc[summary["parameter"] == p, "correlation"]
        r_value = float(r.iloc[0])
        ax.set_title(f"{p}\nr = {r_value:.2f}" if np.isfinite(r_value) else f"{p}\nr undefined", fontsize=8)
        ax.set_xlabel("true")
    axes[0][0].set_ylabel("fitted")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    return path


def plot_confusion(confusion: pd.DataFrame, path: Path) -> Path:
    """Heat map of the model-recovery confusion matrix (fraction of simulated participants won)."""
    fig = _figure(figsize=(1.2 * len(confusion.columns) + 2, 1.0 * len(confusion) + 1.5))
    ax = fig.subplots()
    ax.imshow(confusion.to_numpy(), vmin=0, vmax=1, cmap="Blues")
    ax.set_xticks(range(len(confusion.columns)), confusion.columns, rotation=20, fontsize=8)
    ax.set_yticks(range(len(confusion.index)), confusion.index, fontsize=8)
    for i in range(len(confusion.index)):
        for j in range(len(confusion.columns)):
            ax.text(j, i, f"{confusion.iat[i, j]:.2f}", ha="center", va="center", fontsize=8)
    ax.set_xlabel("winning model (lowest BIC)")
    ax.set_ylabel("generating model")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    return path
