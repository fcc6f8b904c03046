"""The rationality analysis written out: tables, plots (PNG) and report sections."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from shortcut_gym.lab.rationality.analysis import PLANNED, RationalityResult
from shortcut_gym.lab.report.markdown import markdown_table, write_table


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def plot_time_lost(per: pd.DataFrame, path: Path) -> Path:
    """Per participant: time lost by their choices (planner's values) and excess time (simulated), s."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(max(5.0, 0.35 * len(per) + 2), 3.2))
    x = np.arange(len(per))
    ax.bar(x - 0.2, per["time_lost_s"], 0.4, label="time lost by the choices (planner's values)")
    ax.bar(x + 0.2, per["excess_time_s"], 0.4, yerr=1.96 * per["optimum_time_se"], label="logged - optimum (simulated)")
    ax.axhline(0, color="k", lw=0.6)
    ax.set_xticks(x, per["participant"], rotation=60, ha="right", fontsize=7)
    ax.set_ylabel("seconds against own optimum")
    ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def plot_rationality_index(per: pd.DataFrame, path: Path) -> Path:
    """Inverse temperature with its 95% profile interval against the share of optimal choices."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(5, 3.4))
    beta = per["beta"].clip(lower=1e-3)
    low = (beta - per["beta_low"].clip(lower=1e-3)).clip(lower=0)
    high = (per["beta_high"] - beta).clip(lower=0)
    ax.errorbar(per["optimal_share"], beta, yerr=[low, high], fmt="o", ms=4, capsize=2)
    ax.set_yscale("log")
    ax.set_xlabel("share of optimal choices")
    ax.set_ylabel("inverse temperature beta (1/s)")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def write_rationality(result: RationalityResult, out: Path) -> tuple[list[tuple[Path, str]], list[tuple[str, str]]]:
    """Write the tables and plots into ``out``; returns (file entries, report sections)."""
    out.mkdir(parents=True, exist_ok=True)
    per = result.participants
    entries = [
        (write_table(per, out, "rationality_participants"), "per participant: time lost, excess time, share of "
         "optimal choices, beta with its interval, planned vs learning model, own operator times"),
        (write_table(result.commands, out, "rationality_commands"), "per participant x command: does learning pay "
         "for them, did they learn it"),
        (write_table(result.trials, out, "rationality_trials"), "per trial: planner values, optimal action, time lost"),
        (write_table(result.durations, out, "duration_fits"), "per participant: operator times from their durations "
         "with standard errors"),
        (write_table(result.fits, out, "rationality_fits"), "choice fits with the joint choice + duration likelihood"),
        (write_table(result.group, out, "rationality_group"), "group figures"),
        (plot_time_lost(per, out / "time_lost.png"), "time against own optimum per participant"),
        (plot_rationality_index(per, out / "rationality_index.png"), "beta with interval vs optimal share"),
    ]
    cols = [c for c in ("participant", "time_lost_s", "excess_time_s", "optimal_share", "beta", "beta_low",
                        "beta_high", "learned_where_pays", "commands_pay", "better_model") if c in per.columns]
    cmd = result.commands
    crosstab = pd.crosstab(cmd["learning_pays"].map({True: "learning pays", False: "does not pay"}),
                           cmd["learned"].map({True: "learned", False: "not learned"}))
    better = (per["better_model"] == PLANNED).sum() if "better_model" in per else 0
    sections = [
        ("Rationality against each participant's own optimum",
         "Each participant's operator times are fitted to their own trial durations; the yardstick planner "
         "plans for the world they imply. *Time lost* is the seconds given up by the logged choices, valued by"
         " the planner with the homing priced at the midpoint of the participant's and the optimum's hand "
         "shares (zero for optimal choices; an upper estimate with ACT-R memory, see docs/rationality.md); "
         "*excess* is the logged time minus the planner's simulated mean time on the participant's own "
         "schedule. *beta* is the fitted inverse temperature of `planned_choice` with its 95% profile interval"
         f" (the rationality index). {better} of {len(per)} participants are better explained by "
         "`planned_choice` than by the learning models (BIC).\n\n"
         + markdown_table(per[cols]) + "\n\n" + markdown_table(result.group) + "\n\n"
         "Commands (participant x command): does learning the hotkey pay for them, did they learn it.\n\n"
         + markdown_table(crosstab, index=True)
         + "\n\n![time lost](time_lost.png)\n\n![rationality index](rationality_index.png)"),
    ]
    return entries, sections
