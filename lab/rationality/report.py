"""The rationality analysis written out: tables, plots (PNG) and report sections."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.lab.rationality.analysis import BETTER_COUNT_FIGURE, PLANNED, PXP_FIGURE, RationalityResult
from shortcut_gym.lab.report.markdown import markdown_table, write_table
from shortcut_gym.lab.report.sections import fit_quality_section

#: The per-participant columns the report and the CLI show first (headline, its SE, decomposition).
HEADLINE_COLUMNS = ("participant", "simulated_time_lost_s", "simulated_time_lost_se", "q_time_lost_s",
                    "optimal_share", "beta", "beta_low", "beta_high")


def _figure(**kwargs: Any) -> Any:
    """A matplotlib ``Figure`` (object API: no pyplot, the global backend is left alone)."""
    from matplotlib.figure import Figure

    return Figure(**kwargs)


def plot_time_lost(per: pd.DataFrame, path: Path) -> Path:
    """Per participant: simulated time lost with its 95% Monte Carlo interval (error bar) and +-2
    planner SDs (grey band: the luck one history carries, ``optimum_time_sd_s``), beside the
    decomposition from the planner's values, s."""
    fig = _figure(figsize=(max(5.0, 0.35 * len(per) + 2), 3.2))
    ax = fig.subplots()
    x = np.arange(len(per))
    if "optimum_time_sd_s" in per:
        luck = 2 * per["optimum_time_sd_s"].fillna(0.0).to_numpy()
        ax.bar(x - 0.2, 2 * luck, 0.5, bottom=-luck, color="0.85", label="+-2 SD of one optimal history (luck)")
    ax.bar(x - 0.2, per["simulated_time_lost_s"], 0.4, yerr=1.96 * per["simulated_time_lost_se"].fillna(0.0),
           label="logged - optimum (simulated on own schedule)")
    ax.bar(x + 0.2, per["q_time_lost_s"], 0.4, label="sum of Q(a*) - Q(a) (approximate decomposition)")
    ax.axhline(0, color="k", lw=0.6)
    ax.set_xticks(x, per["participant"], rotation=60, ha="right", fontsize=7)
    ax.set_ylabel("seconds against own optimum")
    ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    return path


def plot_rationality_index(per: pd.DataFrame, path: Path) -> Path:
    """Inverse temperature with its 95% profile interval against the share of optimal choices,
    each point labelled with its participant."""
    fig = _figure(figsize=(5, 3.4))
    ax = fig.subplots()
    beta = per["beta"].clip(lower=1e-3)
    low = (beta - per["beta_low"].clip(lower=1e-3)).clip(lower=0)
    high = (per["beta_high"] - beta).clip(lower=0)
    ax.errorbar(per["optimal_share"], beta, yerr=[low, high], fmt="o", ms=4, capsize=2)
    for pid, xv, yv in zip(per["participant"], per["optimal_share"], beta, strict=True):
        ax.annotate(str(pid), (xv, yv), textcoords="offset points", xytext=(3, 3), fontsize=6)
    ax.set_yscale("log")
    ax.set_xlabel("share of optimal choices")
    ax.set_ylabel("inverse temperature beta (1/s)")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    return path


def write_rationality(result: RationalityResult, out: Path) -> tuple[list[tuple[Path, str]], list[tuple[str, str]]]:
    """Write the tables and plots into ``out``; returns (file entries, report sections)."""
    out.mkdir(parents=True, exist_ok=True)
    per = result.participants
    entries = [
        (write_table(per, out, "rationality_participants"), "per participant: simulated time lost with its SE, "
         "the Q-value decomposition, share of optimal choices, beta with its interval, planned vs learning "
         "model, own operator times"),
        (write_table(result.commands, out, "rationality_commands"), "per participant x command: does learning pay "
         "for them, did they learn it"),
        (write_table(result.trials, out, "rationality_trials"), "per trial: planner values, optimal action, "
         "Q-value time lost"),
        (write_table(result.durations, out, "duration_fits"), "per participant: operator times from their durations "
         "with standard errors"),
        (write_table(result.fits, out, "rationality_fits"), "choice fits with the joint choice + duration likelihood"),
        (write_table(result.group, out, "rationality_group"), "group figures"),
        (plot_time_lost(per, out / "time_lost.png"), "time against own optimum per participant"),
        (plot_rationality_index(per, out / "rationality_index.png"), "beta with interval vs optimal share"),
    ]
    cols = [c for c in HEADLINE_COLUMNS + ("learned_where_pays", "commands_pay", "better_model") if c in per.columns]
    cmd = result.commands
    crosstab = pd.crosstab(cmd["learning_pays"].map({True: "learning pays", False: "does not pay"}),
                           cmd["learned"].map({True: "learned", False: "not learned"}))
    better = (per["better_model"] == PLANNED).sum() if "better_model" in per else 0
    n_sims = sorted(set(per["n_sims"].astype(int))) if "n_sims" in per and len(per) else []
    sims = f"{n_sims[0]} simulated users" if len(n_sims) == 1 else "the simulated users"
    held = per[per["held_operators"].fillna("").astype(str) != ""] if "held_operators" in per else per.iloc[:0]
    sections = [
        ("Rationality against each participant's own optimum",
         "Each participant's operator times are fitted to their own trial durations; the yardstick planner "
         "plans for the world they imply. *Time lost* (`simulated_time_lost_s`, with its Monte Carlo standard"
         f" error `simulated_time_lost_se` over {sims}) is the logged total time minus the planner's mean "
         "simulated time on the participant's own schedule (their targets in order) in that world; one "
         "history carries its luck with recall and noise, of the order of `optimum_time_sd_s`. "
         "`q_time_lost_s` decomposes the loss over trials by the planner's action values, Q(a*) - Q(a) summed"
         " (zero for optimal choices; approximate: off by up to +70% with ACT-R memory, see "
         "docs/rationality.md). *beta* is the fitted inverse temperature of `planned_choice` with its 95% "
         f"profile interval (the rationality index). {better} of {len(per)} participants are better "
         "explained by `planned_choice` than by the learning models (BIC).\n\n"
         + markdown_table(per[cols]) + "\n\n" + markdown_table(result.group) + "\n\n"
         "Commands (participant x command): does learning the hotkey pay for them, did they learn it.\n\n"
         + markdown_table(crosstab, index=True)
         + "\n\n![time lost](time_lost.png)\n\n![rationality index](rationality_index.png)"),
        ("Participants judged partly on the study's operator times", held_operators_text(held, len(per))),
        ("Fit quality (rationality choice fits)",
         fit_quality_section(result.fits, "`rationality_fits.csv` for every choice fit")[1]),
    ]
    return entries, sections


def verdict_scope(result: RationalityResult) -> str:
    """The sentence a report's verdict adds when the rationality section is there: planned_choice is
    not among the models the verdict compares, and what the section finds for it."""
    group = dict(zip(result.group["figure"], result.group["value"], strict=True)) if len(result.group) else {}
    count, pxp = group.get(BETTER_COUNT_FIGURE), group.get(PXP_FIGURE)
    found = ""
    if count is not None and np.isfinite(count):
        found = (f": {int(count)} of {len(result.participants)} participants are better explained by it than by "
                 "the learning models (BIC)")
        if pxp is not None and np.isfinite(pxp):
            found += f", BMS protected exceedance probability {pxp:.2f}"
    return (f"This verdict compares the `--model` models only. `{PLANNED}` (softmax over the yardstick planner's "
            "values in each participant's own world) is fitted per participant in the section \"Rationality "
            f"against each participant's own optimum\"{found}.")


def held_operators_text(held: pd.DataFrame, n: int) -> str:
    """The section naming participants whose durations could not show some operator times: their
    optimum (and so their time lost, optimal share and beta) uses the study's values there."""
    if held.empty:
        return f"None: every operator time of all {n} participants was fitted to their own durations."
    lines = [f"- `{pid}`: {ops.replace(';', ', ')}" for pid, ops in zip(held["participant"], held["held_operators"],
                                                                      strict=True)]
    return (f"{len(held)} of {n} participants never showed some operators in their trials (no hotkey trial: "
            "no keystroke time; no learn trial: no encoding time; ...), so those operators keep the study's "
            "values and their optimum is the study's answer there, not theirs. A participant who never pressed a "
            "hotkey may have stayed with the menus *because* keys are slow for them; these data cannot tell. "
            "Read their time lost, optimal share and beta with this in mind:\n\n" + "\n".join(lines))
