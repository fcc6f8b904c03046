"""The verdict across model-comparison criteria, and the report sections of the group-level analyses.

Criteria compared (each names one preferred model, or none):

* per-participant BIC: the model most participants' BICs choose, and the lowest summed BIC;
* random-effects BMS: the highest protected exceedance probability (none when two are within 0.01);
* integrated BIC of the hierarchical fit (Huys et al. 2011, PLoS Computational Biology 7(4), e1002028);
* cross-validated log-likelihood: the highest summed held-out ln L (leave one session out).

When they disagree the verdict says which criterion prefers which model and why criteria can part:
BIC charges every participant ln n per parameter, iBIC charges the group parameters once and lets the
group prior shrink noisy participants, held-out likelihood scores prediction with no penalty formula,
and BMS lets each participant have their own model.
"""

from __future__ import annotations

import pandas as pd

from shortcut_gym.lab.compare import BMSResult
from shortcut_gym.lab.report.markdown import markdown_table

#: Why criteria can disagree, said once under a disagreement.
WHY_THEY_PART = (
    "They measure different things: per-participant BIC charges every participant ln(trials) per "
    "parameter; iBIC charges the group-level parameters once and lets the group prior shrink noisy "
    "participants, so a richer model can win by iBIC and lose by BIC; held-out log-likelihood scores "
    "prediction of unseen sessions with no penalty formula; random-effects BMS lets each participant "
    "have their own model, so a model that is best for a minority can still lead it."
)


def criterion_winners(summed: pd.DataFrame, bms: BMSResult, ibic: pd.DataFrame | None = None,
                      cv: pd.DataFrame | None = None) -> dict[str, str | None]:
    """Criterion -> preferred model (None when no model leads), in a fixed order.

    ``summed``: :func:`~shortcut_gym.lab.compare.summed_criteria`; ``ibic``: the summary of
    :func:`~shortcut_gym.lab.fitting.fit_hierarchical_models`; ``cv``: :func:`~shortcut_gym.lab.fitting.cv_summary`.
    """
    out: dict[str, str | None] = {}
    by_bic = summed.sort_values("bic").reset_index(drop=True)
    out["summed BIC"] = str(by_bic.loc[0, "model"])
    if "wins_bic" in summed.columns:
        wins = summed.sort_values("wins_bic", ascending=False).reset_index(drop=True)
        tie = len(wins) > 1 and wins.loc[0, "wins_bic"] == wins.loc[1, "wins_bic"]
        out["participants' BIC"] = None if tie else str(wins.loc[0, "model"])
    pxp = bms.table().sort_values("protected_exceedance", ascending=False).reset_index(drop=True)
    lead = len(pxp) < 2 or pxp.loc[0, "protected_exceedance"] - pxp.loc[1, "protected_exceedance"] >= 0.01
    out["BMS"] = str(pxp.loc[0, "model"]) if lead else None
    if ibic is not None and len(ibic):
        out["iBIC"] = str(ibic.sort_values("ibic").iloc[0]["model"])
    if cv is not None and len(cv):
        out["held-out ln L"] = str(cv.sort_values("heldout_loglik", ascending=False).iloc[0]["model"])
    return out


def agreement_words(winners: dict[str, str | None]) -> str:
    """One paragraph: all criteria agree on a model, or which criterion prefers which model."""
    named = {c: m for c, m in winners.items() if m is not None}
    undecided = [c for c, m in winners.items() if m is None]
    models = sorted(set(named.values()), key=list(named.values()).index)
    tail = f" ({', '.join(undecided)}: no model leads)" if undecided else ""
    if len(models) == 1:
        return (f"The criteria agree: {', '.join(named)} all prefer **{models[0]}**{tail}.")
    parts = []
    for m in models:
        which = [c for c, w in named.items() if w == m]
        parts.append(f"{' and '.join(which)} {'prefers' if len(which) == 1 else 'prefer'} **{m}**")
    return "The criteria disagree: " + "; ".join(parts) + tail + ". " + WHY_THEY_PART


def hierarchical_section(summary: pd.DataFrame, groups: pd.DataFrame, covariance: str = "diagonal") -> tuple[str, str]:
    """Report section of the hierarchical fits: iBIC per model and the group parameters (group prior
    ``covariance`` "diagonal" or "full")."""
    cols = ["model", "participants", "n_params", "log_evidence", "ibic", "delta_ibic", "iterations", "converged"]
    body = (f"EM with a Gaussian group prior ({covariance} covariance) on the transformed parameters and a "
            "Laplace approximation per "
            "participant (Huys et al. 2011). Integrated BIC = -2 ln p(data | group prior) + group parameters x "
            "ln(trials); lower is better.\n\n" + markdown_table(summary[cols])
            + "\n\nGroup median and the range holding 95% of participants, per parameter "
              "(`hierarchical_group.csv`; MAPs with posterior SDs in `hierarchical_participants.csv`).\n\n"
            + markdown_table(groups[["model", "parameter", "median", "low_95", "high_95", "sd_free"]], digits=3))
    return ("Hierarchical fit", body)


def cross_validation_section(cv: pd.DataFrame, summed: pd.DataFrame) -> tuple[str, str]:
    """Report section of leave-one-session-out cross-validation, beside the summed AIC and BIC."""
    table = cv.merge(summed[["model", "aic", "bic", "wins_bic"]], on="model", how="left")
    cols = ["model", "participants", "heldout_loglik", "delta_heldout", "wins_cv", "aic", "bic", "wins_bic"]
    body = ("Leave-one-session-out: each session's choices predicted by the parameters fitted to the "
            "participant's other sessions, summed over sessions and participants (higher is better; "
            "`cv.csv` per participant). Beside it the summed AIC and BIC of the full-data fits.\n\n"
            + markdown_table(table[cols]))
    return ("Cross-validated comparison", body)
