"""What ``recover`` reports: parameters held fixed in the population, and the doubtful fits.

A parameter drawn as one fixed value has no spread, so a correlation with it is undefined
(Pearson's r divides by the standard deviation of the truth; Spearman's by that of its ranks).
The checks compare against scipy's independent implementations where the correlation is defined.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from scipy import stats

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.population import read_population
from shortcut_gym.lab.checks.recovery import correlation_or_nan, parameter_recovery
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.report import fit_quality_section, parameter_recovery_section

# one value held fixed at 0.4: the float mean of three 0.4s is not exactly 0.4, so a test on the
# standard deviation being > 0 lets a meaningless "correlation" through
HELD = {"models": {
    "rw": {"agent": "rescorla_wagner", "participants": 3,
           "parameters": {"alpha": 0.4, "beta": {"dist": "uniform", "low": 2.0, "high": 8.0}}},
    "ck": {"agent": "choice_kernel", "participants": 3},
}}


@pytest.mark.parametrize("value", [0.1, 0.3, 0.4, 0.7, 1 / 3, 2.0, 46.2])
@pytest.mark.parametrize("n", [2, 3, 5, 9, 30])
def test_constant_truth_has_no_correlation(value: float, n: int) -> None:
    rng = np.random.default_rng(n)
    fitted = rng.normal(size=n)
    truth = np.full(n, value)
    assert np.isnan(correlation_or_nan(truth, fitted)) and np.isnan(correlation_or_nan(fitted, truth))


@pytest.mark.parametrize("n", [2, 3, 7, 40])
def test_correlation_matches_scipy_where_defined(n: int) -> None:
    rng = np.random.default_rng(100 + n)
    x = rng.uniform(0, 1, n)
    y = 0.5 * x + rng.normal(0, 0.3, n)
    assert correlation_or_nan(x, y) == pytest.approx(stats.pearsonr(x, y)[0], abs=1e-12)
    assert np.isnan(correlation_or_nan(x[:1], y[:1]))


def test_parameter_held_fixed_is_undefined_and_not_called_worst() -> None:
    rw = read_population(HELD)[0]
    pairs, summary = parameter_recovery(make_world(schedule={"sessions": 2}), rw.spec, rw.participants, seed=5,
                                        n_starts=2, population=rw)
    by = summary.set_index("parameter")
    assert np.isnan(by.loc["alpha", "correlation"]) and np.isnan(by.loc["alpha", "rank_correlation"])
    assert by.loc["alpha", "true_sd"] == 0.0 and by.loc["alpha", "drawn"] == "fixed 0.4"
    a = pairs[pairs["parameter"] == "alpha"]
    assert (a["true"] == 0.4).all()
    assert by.loc["alpha", "bias"] == pytest.approx(float(np.mean(a["fitted"] - 0.4)), abs=1e-12)
    b = pairs[pairs["parameter"] == "beta"]
    assert b["true"].nunique() == 3
    assert by.loc["beta", "correlation"] == pytest.approx(stats.pearsonr(b["true"], b["fitted"])[0], abs=1e-9)
    assert by.loc["beta", "rank_correlation"] == pytest.approx(stats.spearmanr(b["true"], b["fitted"])[0],
                                                               abs=1e-9)
    _, body = parameter_recovery_section("rw", summary)
    assert "| alpha | - | - |" in body
    assert "Held fixed" in body and "alpha (fixed 0.4)" in body
    assert f"Lowest true-fitted correlation: beta ({by.loc['beta', 'correlation']:.2f})" in body


def test_section_when_no_correlation_is_defined() -> None:
    summary = pd.DataFrame([{"parameter": "alpha", "correlation": np.nan, "rank_correlation": np.nan, "bias": 0.1,
                             "rmse": 0.2, "true_sd": 0.0, "n": 4, "drawn": "fixed 0.3"}])
    _, body = parameter_recovery_section("m", summary)
    assert "No true-fitted correlation is defined" in body and "Lowest" not in body
    assert "alpha (fixed 0.3)" in body


def _table_rows(index: str, heading: str) -> list[dict[str, str]]:
    """The rows of the first pipe table under ``## heading`` of an index.md."""
    part = index.split(f"## {heading}\n", 1)[1].split("\n## ", 1)[0]
    lines = [ln for ln in part.splitlines() if ln.startswith("|")]
    head = [c.strip() for c in lines[0].strip("|").split("|")]
    return [dict(zip(head, (c.strip() for c in ln.strip("|").split("|")), strict=True)) for ln in lines[2:]]


def test_recover_index_names_fixed_parameters_and_every_doubtful_fit(tmp_path: Path) -> None:
    spec = tmp_path / "pop.yaml"
    spec.write_text(yaml.safe_dump(HELD))
    out = tmp_path / "rec"
    assert main(["recover", "--population", str(spec), "--sessions", "2", "--starts", "2", "--seed", "5",
                 "--out", str(out), "--quiet"]) == 0  # both studies
    index = (out / "index.md").read_text()
    summary = pd.read_csv(out / "parameter_recovery_rw.csv").set_index("parameter")
    assert np.isnan(summary.loc["alpha", "correlation"]) and np.isnan(summary.loc["alpha", "rank_correlation"])
    recovery = index.split("## Parameter recovery (rw)\n", 1)[1].split("\n## ", 1)[0]
    assert "alpha (fixed 0.4)" in recovery and "Lowest true-fitted correlation: beta" in recovery

    fits = pd.read_csv(out / "model_recovery_fits.csv")
    assert fits["fit_ok"].dtype == bool
    ok = fits["fit_ok"]
    assert ok.any() and (~ok).any()  # the check below sees both kinds
    listed = _table_rows(index, "Fit quality (model-recovery fits)")
    assert {(r["generator"], r["participant"], r["model"]) for r in listed} == set(
        zip(fits.loc[~ok, "generator"], fits.loc[~ok, "participant"], fits.loc[~ok, "model"], strict=True))
    assert len(listed) == int((~ok).sum())
    issues = {(r["participant"], r["model"]): r["fit_issues"] for r in listed}
    for _, row in fits[~ok].iterrows():
        assert issues[(row["participant"], row["model"])] == str(row["fit_issues"])
    assert f"{int(ok.sum())} of {len(fits)} fits passed every check" in index
    assert f"{int((~ok).sum())} doubtful fit(s)" in index


def test_fit_quality_section_without_doubtful_fits() -> None:
    fits = pd.DataFrame([{"participant": "p", "model": "m", "loglik": -1.0, "starts_near_best": 2, "n_starts": 2,
                          "fit_ok": True, "fit_issues": ""}])
    heading, body = fit_quality_section(fits)
    assert heading == "Fit quality" and "1 of 1 fits passed" in body and "No doubtful fits" in body
