"""Report folders: tables (CSV) and plots (PNG) of fits, comparisons, recovery and predictive checks.

Every writer takes the folder and returns the paths it wrote; :func:`write_index` writes
``index.md``: the findings as Markdown (verdict, tables, plots), then each file with a line of
explanation.
"""

from __future__ import annotations

from collections.abc import Sequence
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


def markdown_table(table: pd.DataFrame, index: bool = False, digits: int = 2) -> str:
    """A pipe table of ``table``: floats to ``digits`` decimals (index values, e.g. swept settings, in
    full), NaN as a dash, numbers right-aligned."""
    n_index = table.index.nlevels if index else 0
    df = table.reset_index() if index else table

    def cell(v: object, is_index: bool) -> str:
        if isinstance(v, (float, np.floating)):
            return "-" if np.isnan(v) else (f"{v:g}" if is_index else f"{v:.{digits}f}")
        return str(v).replace("|", "\\|")

    numeric = [pd.api.types.is_numeric_dtype(df[c]) for c in df.columns]
    head = "| " + " | ".join(str(c) for c in df.columns) + " |"
    rule = "|" + "|".join("---:" if n else "---" for n in numeric) + "|"
    rows = ["| " + " | ".join(cell(v, i < n_index) for i, v in enumerate(row)) + " |"
            for row in df.itertuples(index=False)]
    return "\n".join([head, rule, *rows])


def index_markdown(folder: Path, entries: Sequence[tuple[Path, str]], title: str,
                   sections: Sequence[tuple[str, str]] | None = None, intro: str = "") -> str:
    """A folder's ``index.md`` text: the title, ``intro``, the findings (``sections``: heading and
    Markdown body each), then one line per written file (paths relative to ``folder``)."""
    lines = [f"# {title}", ""]
    if intro:
        lines += [intro.strip(), ""]
    for heading, body in sections or []:
        lines += [f"## {heading}", "", body.strip(), ""]
    if sections:
        lines += ["## Files", ""]
    for p, what in entries:
        lines.append(f"- `{Path(p).relative_to(folder).as_posix()}`: {what}")
    return "\n".join(lines) + "\n"


def write_index(folder: Path, entries: Sequence[tuple[Path, str]], title: str,
                sections: Sequence[tuple[str, str]] | None = None) -> Path:
    """Write :func:`index_markdown` to ``folder/index.md``; returns the path."""
    path = folder / "index.md"
    path.write_text(index_markdown(folder, entries, title, sections))
    return path


def parameter_recovery_section(label: str, summary: pd.DataFrame) -> tuple[str, str]:
    """Report section of one model's parameter recovery (correlation, bias, RMSE per parameter)."""
    cols = [c for c in ("parameter", "correlation", "bias", "rmse", "true_sd", "n") if c in summary.columns]
    worst = summary.sort_values("correlation").iloc[0]
    words = (f"Lowest true-fitted correlation: {worst['parameter']} ({worst['correlation']:.2f}). "
             f"![true vs fitted](parameter_recovery_{label}.png)")
    return (f"Parameter recovery ({label})", markdown_table(summary[cols]) + "\n\n" + words)


def model_recovery_section(confusion: pd.DataFrame) -> tuple[str, str]:
    """Report section of a model-recovery confusion matrix (rows generating, columns winning)."""
    diagonal = float(np.mean([confusion.loc[m, m] for m in confusion.index if m in confusion.columns]))
    return ("Model recovery", "Share of simulated participants won by each model (rows: the model that "
            f"generated the data; columns: the winner by BIC). Mean diagonal {diagonal:.2f}.\n\n"
            + markdown_table(confusion, index=True) + "\n\n![confusion](model_confusion.png)")


def comparison_sections(summed: pd.DataFrame, bms: BMSResult) -> list[tuple[str, str]]:
    """Report sections of a model comparison: the verdict in words, summed criteria, BMS, the plot."""
    best = summed.sort_values("bic").reset_index(drop=True)
    bms_table = bms.table()
    ranked = bms_table.sort_values("protected_exceedance", ascending=False).reset_index(drop=True)
    top = ranked.iloc[0]
    words = f"Lowest summed BIC: **{best.loc[0, 'model']}**"
    if len(best) > 1:
        words += f" ({best.loc[1, 'bic'] - best.loc[0, 'bic']:.1f} below {best.loc[1, 'model']})"
    risk = (f"Bayesian omnibus risk {top['bor']:.2f}, the probability that the models are equally "
            "frequent")
    if bms.bor_exact is not None:
        risk += (f"; exact for this small group: {bms.bor_exact:.2f}, the variational value leans to equal "
                 "frequencies when participants are few")
    close = bms_table["protected_exceedance"] > top["protected_exceedance"] - 0.01  # within 0.01: no leader
    if close.sum() > 1:
        leaders = ", ".join(bms_table.loc[close, "model"])  # in the fitted order
        words += (f". Random-effects model selection: no model leads ({leaders} are within 0.01 of the highest "
                  f"protected exceedance probability, {top['protected_exceedance']:.2f}; {risk}).")
    else:
        words += (f". Random-effects model selection: **{top['model']}** has the highest protected exceedance "
                  f"probability ({top['protected_exceedance']:.2f}; {risk}).")
    words += (" Summed BIC assumes one model for everyone; the random-effects view allows each participant "
              "their own.")
    return [
        ("Verdict", words),
        ("Summed criteria", markdown_table(summed)),
        ("Random-effects Bayesian model selection", markdown_table(bms_table, digits=3)
         + "\n\n![summed BIC differences and BMS](comparison.png)"),
    ]


def analyse_log(log: pd.DataFrame, specs: list, world, out: Path, n_starts: int = 10, seed: int = 0,
                n_jobs: int = 1, n_sims: int = 50, block: str | int = "session", priors: dict | None = None,
                knockout: str | None = None, progress: bool = False,
                extra_sections: Sequence[tuple[str, str]] = (), extra_entries: Sequence[tuple[Path, str]] = (),
                ) -> tuple[Path, dict[str, pd.DataFrame]]:
    """Fit, compare, posterior-predictive check (and optional knock-out) of a validated log into ``out``.

    ``index.md`` gives the findings (verdict, tables, plots) then the files; ``extra_sections`` and
    ``extra_entries`` (already written) are added to it. Returns (index path, the tables by name).
    """
    from shortcut_gym.lab.checks.predictive import plot_predictive, posterior_predictive
    from shortcut_gym.lab.checks.recovery import knockout_study
    from shortcut_gym.lab.compare import bms_of_fits, comparison_table, summed_criteria
    from shortcut_gym.lab.fitting import context_for, fit_log

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
    sections = comparison_sections(summed, bms)
    sections.append(("Posterior-predictive check",
                     f"Hotkey share per {block} block, data against {n_sims} simulations of each fitted model "
                     "on each participant's own schedule (`predictive_group.csv`).\n\n"
                     "![posterior-predictive check](predictive.png)"))
    if knockout is not None:
        by_label = {s.label: s for s in specs}
        if knockout not in by_label:
            raise ValueError(f"knock-out model {knockout!r} is not among the fitted models {list(by_label)}")
        ko, ko_fits = knockout_study(log, by_label[knockout], world, n_starts, seed, n_jobs, progress)
        entries.append((write_table(ko, out, "knockout"), f"BIC change when each mechanism of {knockout} is removed"))
        entries.append((write_table(ko_fits, out, "knockout_fits"), "fits of the knock-out variants"))
        tables["knockout"] = ko
        sections.append((f"Mechanism knock-out ({knockout})",
                         "Summed BIC change when each mechanism is removed and the model refitted "
                         "(positive: the data need the mechanism).\n\n"
                         + markdown_table(ko[["mechanism", "delta_bic", "participants_worse", "participants"]])))
    sections += list(extra_sections)
    entries += list(extra_entries)
    return write_index(out, entries, "Model analysis", sections), tables
