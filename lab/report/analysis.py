"""The analysis of a log into one report folder: fit, compare, posterior-predictive check, knock-out."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import pandas as pd

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.checks.predictive import (
    ROUGH_BAND_REPLICATES,
    band_words,
    plot_predictive,
    posterior_predictive,
)
from shortcut_gym.lab.checks.recovery import knockout_study, knockout_variants
from shortcut_gym.lab.compare import bms_of_fits, comparison_table, summed_criteria
from shortcut_gym.lab.fitting import (
    context_for,
    cross_validate,
    cv_summary,
    cv_table,
    fit_hierarchical_models,
    fit_log,
    hierarchical_tables,
    long_table,
)
from shortcut_gym.lab.report.criteria_verdict import (
    agreement_words,
    criterion_winners,
    cross_validation_section,
    hierarchical_section,
)
from shortcut_gym.lab.report.markdown import markdown_table, write_index, write_table
from shortcut_gym.lab.report.plots import plot_comparison
from shortcut_gym.lab.report.sections import comparison_sections, fit_quality_section


def predictive_words(block: str | int, n_sims: int, interval: float) -> str:
    """The posterior-predictive section: what was simulated, how blocks are numbered, and a warning
    when too few replicates were simulated for the band to be read."""
    what = "session" if block == "session" else f"{block}-trial"
    words = (f"Hotkey share per {what} block (blocks numbered from 0, as in `predictive_group.csv`), data against "
             f"{n_sims} simulation{'s' if n_sims != 1 else ''} of each fitted model on each participant's own "
             f"schedule, with the {band_words(interval, None).removeprefix('model ')} of the simulated group mean.")
    if n_sims < ROUGH_BAND_REPLICATES:
        words += (f" **The band is rough:** it rests on {n_sims} replicate{'s' if n_sims != 1 else ''} (fewer than "
                  f"{ROUGH_BAND_REPLICATES}), so its {(1 - interval) / 2:.0%} and {(1 + interval) / 2:.0%} points are "
                  "little more than the lowest and highest simulated values; run with "
                  f"`--sims {ROUGH_BAND_REPLICATES}` or more to read it.")
    return words + "\n\n![posterior-predictive check](predictive.png)"


def analyse_log(log: pd.DataFrame, specs: list, world, out: Path, n_starts: int = 10, seed: int = 0,
                n_jobs: int = 1, n_sims: int = 50, block: str | int = "session", priors: dict | None = None,
                knockout: str | None = None, progress: bool = False, hierarchical: bool = False,
                cross_validated: bool = False, extra_sections: Sequence[tuple[str, str]] = (),
                extra_entries: Sequence[tuple[Path, str]] = (),
                intervals: str = "wald", start_ranges: dict | None = None, covariance: str = "diagonal",
                verdict_note: str = "") -> tuple[Path, dict[str, pd.DataFrame]]:
    """Fit, compare, posterior-predictive check (and optional knock-out) of a validated log into ``out``.

    ``index.md`` gives the findings (verdict, tables, plots) then the files; ``extra_sections`` and
    ``extra_entries`` (already written) are added to it. ``hierarchical`` adds the hierarchical fits
    (iBIC; group prior ``covariance`` "diagonal" or "full"), ``cross_validated`` the
    leave-one-session-out comparison; the verdict then weighs them too. ``verdict_note`` is added to
    the verdict (what it leaves out). Returns (index path, the tables by name).
    """
    by_label = {s.label: s for s in specs}
    if len(specs) < 2:  # checked before any fit is made: the comparison and the BMS need two models
        raise ConfigError(f"a report compares models: give at least two models, got {[s.label for s in specs]} "
                          "(fit fits a single model)")
    if knockout is not None:  # checked before any fit is made
        if knockout not in by_label:
            raise ConfigError(f"knock-out model {knockout!r} is not among the fitted models {list(by_label)}")
        knockout_variants(by_label[knockout])
    out.mkdir(parents=True, exist_ok=True)
    context = context_for(log, world.commands.names, world)  # as ``fit`` builds it: agents may plan with the world
    fits = fit_log(log, specs, context, n_starts, seed, n_jobs, priors, progress,
                   start_ranges, intervals)
    parameters = long_table(fits)
    table = comparison_table(fits)
    summed = summed_criteria(fits)
    bms = bms_of_fits(fits)
    per, group = posterior_predictive(world, log, fits, specs, n_sims, seed, block)
    entries = [
        (write_table(fits, out, "fits"), "best fit per participant x model: ln L, k, n, AIC, BIC, diagnostics, "
                                         "param_*, se_*, lower_*, upper_*"),
        (write_table(parameters, out, "parameters"), "one row per participant x model x parameter: estimate, "
                                                     "standard error, 95% interval"),
        (write_table(table, out, "comparison"), "per participant x model criteria, delta BIC, BIC rank"),
        (write_table(summed, out, "summed_criteria"), "per model: summed ln L, AIC, BIC, participants won"),
        (write_table(bms.table(), out, "bms"), "random-effects BMS: frequencies, exceedance, protected exceedance"),
        (plot_comparison(summed, bms, out / "comparison.png"), "summed BIC differences and BMS"),
        (write_table(per, out, "predictive_participants"), "hotkey share per block, data vs model, per participant"),
        (write_table(group, out, "predictive_group"), "hotkey share per block: data mean vs model mean and band"),
        (plot_predictive(group, out / "predictive.png"), "posterior-predictive check of hotkey use per block"),
    ]
    tables = {"fits": fits, "comparison": table, "summed": summed, "bms": bms.table(), "predictive": group,
              "parameters": parameters}
    sections = comparison_sections(summed, bms)
    sections.append(fit_quality_section(fits))
    ibic = cv = None
    if hierarchical:
        ibic, by_model = fit_hierarchical_models(log, specs, context, n_starts, seed, covariance)
        groups, participants = hierarchical_tables(by_model)
        entries.append((write_table(ibic, out, "hierarchical"), "hierarchical fits: Laplace evidence, iBIC per model"))
        entries.append((write_table(groups, out, "hierarchical_group"), "group mean and SD per parameter"))
        entries.append((write_table(participants, out, "hierarchical_participants"),
                        "MAP and posterior SD per participant"))
        tables["hierarchical"] = ibic
        sections.append(hierarchical_section(ibic, groups, covariance))
    if cross_validated:
        folds = cross_validate(log, specs, context, n_starts, seed)
        cv = cv_summary(folds)
        entries.append((write_table(folds, out, "cv_folds"), "held-out ln L per participant x model x session"))
        entries.append((write_table(cv_table(folds), out, "cv"), "held-out ln L per participant x model, rank"))
        tables["cv"] = cv
        sections.append(cross_validation_section(cv, summed))
    if hierarchical or cross_validated:
        verdict = dict(sections)["Verdict"] + "\n\n" + agreement_words(criterion_winners(summed, bms, ibic, cv))
        sections[0] = ("Verdict", verdict)
    if verdict_note:  # what the verdict leaves out (the rationality section's own model)
        sections[0] = ("Verdict", dict(sections)["Verdict"] + "\n\n" + verdict_note)
    sections.append(("Posterior-predictive check", predictive_words(block, n_sims, float(group["interval"].iloc[0]))))
    if knockout is not None:
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
