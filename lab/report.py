"""Report folders: tables (CSV) and plots (PNG) of fits, comparisons, recovery and predictive checks.

Every writer takes the folder and returns the paths it wrote; :func:`write_index` lists them in
``index.md`` with a line of explanation each.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from shortcut_gym.lab.compare import BMSResult


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def write_table(table: pd.DataFrame, folder: Path, name: str, index: bool = False) -> Path:
    """``folder/name.csv``."""
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name}.csv"
    table.to_csv(path, index=index)
    return path


def plot_comparison(summed: pd.DataFrame, bms: BMSResult, path: Path) -> Path:
    """Summed BIC difference to the best model, and BMS expected frequency / protected exceedance."""
    plt = _plt()
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(9, 3.2))
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
    plt.close(fig)
    return path


def plot_parameter_recovery(pairs: pd.DataFrame, summary: pd.DataFrame, path: Path) -> Path:
    """True vs fitted value per parameter, with the identity line and r in the title."""
    plt = _plt()
    params = list(dict.fromkeys(pairs["parameter"]))
    fig, axes = plt.subplots(1, len(params), figsize=(3 * len(params), 3), squeeze=False)
    for ax, p in zip(axes[0], params, strict=True):
        d = pairs[pairs["parameter"] == p]
        ax.plot(d["true"], d["fitted"], "o", ms=3)
        lo, hi = float(min(d["true"].min(), d["fitted"].min())), float(max(d["true"].max(), d["fitted"].max()))
        ax.plot([lo, hi], [lo, hi], "k--", lw=0.8)
        r = summary.loc[summary["parameter"] == p, "correlation"]
        ax.set_title(f"{p}\nr = {float(r.iloc[0]):.2f}", fontsize=8)
        ax.set_xlabel("true")
    axes[0][0].set_ylabel("fitted")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def plot_confusion(confusion: pd.DataFrame, path: Path) -> Path:
    """Heat map of the model-recovery confusion matrix (fraction of simulated participants won)."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(1.2 * len(confusion.columns) + 2, 1.0 * len(confusion) + 1.5))
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
    plt.close(fig)
    return path


def write_index(folder: Path, entries: list[tuple[Path, str]], title: str) -> Path:
    """``index.md``: one line per written file with what it holds."""
    lines = [f"# {title}", ""]
    for p, what in entries:
        lines.append(f"- `{Path(p).relative_to(folder)}`: {what}")
    path = folder / "index.md"
    path.write_text("\n".join(lines) + "\n")
    return path


def analyse_log(log: pd.DataFrame, specs: list, world, out: Path, n_starts: int = 10, seed: int = 0,
                n_jobs: int = 1, n_sims: int = 50, block: str | int = "session", priors: dict | None = None,
                knockout: str | None = None, progress: bool = False) -> tuple[Path, dict[str, pd.DataFrame]]:
    """Fit, compare, posterior-predictive check (and optional knock-out) of a validated log into ``out``.

    Returns (index path, the tables by name).
    """
    from shortcut_gym.lab.compare import bms_of_fits, comparison_table, summed_criteria
    from shortcut_gym.lab.fitting import context_for, fit_log
    from shortcut_gym.lab.predictive import plot_predictive, posterior_predictive
    from shortcut_gym.lab.recovery import knockout_study

    out.mkdir(parents=True, exist_ok=True)
    fits = fit_log(log, specs, context_for(log, world.commands.names), n_starts, seed, n_jobs, priors, progress)
    table = comparison_table(fits)
    summed = summed_criteria(fits)
    bms = bms_of_fits(fits)
    per, group = posterior_predictive(world, log, fits, specs, n_sims, seed, block)
    entries = [
        (write_table(fits, out, "fits"), "best fit per participant x model: ln L, k, n, AIC, BIC, param_*"),
        (write_table(table, out, "comparison"), "per participant x model criteria, delta BIC, BIC rank"),
        (write_table(summed, out, "summed_criteria"), "per model: summed ln L, AIC, BIC, participants won"),
        (write_table(bms.table(), out, "bms"), "random-effects BMS: frequencies, exceedance, protected exceedance"),
        (plot_comparison(summed, bms, out / "comparison.png"), "summed BIC differences and BMS"),
        (write_table(per, out, "predictive_participants"), "hotkey share per block, data vs model, per participant"),
        (write_table(group, out, "predictive_group"), "hotkey share per block: data mean vs model mean and band"),
        (plot_predictive(group, out / "predictive.png"), "posterior-predictive check of hotkey use per block"),
    ]
    tables = {"fits": fits, "comparison": table, "summed": summed, "bms": bms.table(), "predictive": group}
    if knockout is not None:
        by_label = {s.label: s for s in specs}
        if knockout not in by_label:
            raise ValueError(f"knock-out model {knockout!r} is not among the fitted models {list(by_label)}")
        ko, ko_fits = knockout_study(log, by_label[knockout], world, n_starts, seed, n_jobs, progress)
        entries.append((write_table(ko, out, "knockout"), f"BIC change when each mechanism of {knockout} is removed"))
        entries.append((write_table(ko_fits, out, "knockout_fits"), "fits of the knock-out variants"))
        tables["knockout"] = ko
    return write_index(out, entries, "Model analysis"), tables
