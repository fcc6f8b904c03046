"""Report sections: (heading, Markdown body) pairs for ``index.md`` (verdict, tables, recovery)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from shortcut_gym.lab.compare import BMSResult
from shortcut_gym.lab.report.markdown import markdown_table


def parameter_recovery_section(label: str, summary: pd.DataFrame) -> tuple[str, str]:
    """Report section of one model's parameter recovery (correlation, bias, RMSE per parameter)."""
    cols = [c for c in ("parameter", "correlation", "rank_correlation", "bias", "rmse", "true_sd", "interval_coverage",
                        "n")
            if c in summary.columns]
    words = ""
    held = summary[summary["true_sd"] == 0] if "true_sd" in summary.columns else summary.iloc[:0]
    if not held.empty:
        how = [f"{p} ({d})" if isinstance(d, str) else str(p)
               for p, d in zip(held["parameter"], held.get("drawn", pd.Series(None, index=held.index)), strict=True)]
        words += (f"Held fixed (the same true value for every simulated participant, true SD 0): {', '.join(how)}. "
                  "A correlation with a constant is undefined, shown as -; bias and RMSE still say how far "
                  "the fits landed from that value. ")
    defined = summary[np.isfinite(summary["correlation"].to_numpy(float))]
    if defined.empty:
        words += "No true-fitted correlation is defined. "
    else:
        worst = defined.sort_values("correlation").iloc[0]
        words += f"Lowest true-fitted correlation: {worst['parameter']} ({worst['correlation']:.2f}). "
    words += f"![true vs fitted](parameter_recovery_{label}.png)"
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


def fit_quality_section(fits: pd.DataFrame, estimates: str = "`parameters.csv` for every estimate with its "
                        "standard error and interval") -> tuple[str, str]:
    """Report section listing every doubtful fit (``fit_ok`` false) with its reasons, and the
    agreement of the starts, from a fit table of :func:`~shortcut_gym.lab.fitting.fit_log` (with a
    ``generator`` column, as in model recovery, that column is listed too); ``estimates`` says where
    the reader finds the estimates."""
    if "fit_ok" not in fits.columns:
        return ("Fit quality", "The fit table has no diagnostics (written by an older version).")
    ok = fits["fit_ok"].astype(str).str.lower().isin(["true", "1"])
    cols = ["participant", "model", "loglik", "starts_near_best", "n_starts", "fit_issues"]
    bad = fits.loc[~ok, (["generator"] if "generator" in fits.columns else []) + cols]
    words = (f"{int(ok.sum())} of {len(fits)} fits passed every check (converged, no parameter at a bound, at least "
             "two starts within 0.1 nats of the best, standard errors defined). ")
    if bad.empty:
        return ("Fit quality", words + "No doubtful fits.")
    words += (f"{len(bad)} doubtful fit(s), listed below: treat their estimates (and the standard errors of "
              "parameters at a bound) with care; a parameter at a bound often means the data cannot pin it "
              f"(see {estimates}).")
    return ("Fit quality", words + "\n\n" + markdown_table(bad.reset_index(drop=True)))
