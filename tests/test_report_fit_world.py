"""``report`` fits in the study's world exactly as ``fit`` does, for agents that plan with the world."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.recovery import simulate_known
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.data.logs import participant_trials, validate_log, write_log
from shortcut_gym.lab.fitting import ModelSpec

SCHEDULE = {"sessions": 2, "trials_per_session": 20, "gap_h": 20.0}
#: Two world-reading models (report compares at least two): label -> (--model text, agent options).
MODELS = {"pc": ("pc=planned_choice", {}), "pcl": ("pcl=planned_choice:with_lapse=true", {"with_lapse": True})}


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """A log of planned choosers simulated in a slow typist's world, and the schedule file."""
    folder = tmp_path_factory.mktemp("study")
    world = make_world(costs="slow_typist_mouse", schedule=SCHEDULE)
    log, _ = simulate_known(world, ModelSpec("planned_choice"), 3, np.random.default_rng(7), {"beta": (0.5, 1.5)})
    schedule = folder / "schedule.yaml"
    schedule.write_text("".join(f"{k}: {v}\n" for k, v in SCHEDULE.items()))
    return world, validate_log(log, world.commands), write_log(log, folder / "log.csv"), schedule


def _fits(sub: str, path, schedule, out, costs: str | None, *more: str) -> pd.DataFrame:
    world_args = ["--schedule", str(schedule)] + (["--costs", costs] if costs else [])
    extra = ["--sims", "1"] if sub == "report" else []
    models = [arg for text, _ in MODELS.values() for arg in ("--model", text)]
    assert main([sub, str(path), *models, "--starts", "2", "--seed", "3", *world_args,
                 *extra, *more, "--out", str(out), "--quiet"]) == 0
    return pd.read_csv(out / "fits.csv").sort_values(["model", "participant"], ignore_index=True)


@pytest.mark.parametrize("costs", ["slow_typist_mouse", "fast_typist_mouse"])
def test_report_and_fit_give_the_same_log_likelihoods_in_the_same_non_default_world(study, tmp_path, capsys, costs):
    world, log, path, schedule = study
    both = ("--hierarchical", "--cross-validate")
    fit = _fits("fit", path, schedule, tmp_path / "f", costs, *both)
    report = _fits("report", path, schedule, tmp_path / "r", costs, *both)
    capsys.readouterr()
    np.testing.assert_array_equal(report["loglik"].to_numpy(), fit["loglik"].to_numpy())
    assert list(report["participant"]) == list(fit["participant"]) and len(report) == 3 * len(MODELS)
    for name, column in (("hierarchical", "log_evidence"), ("cv_folds", "heldout_loglik")):
        ours, theirs = (pd.read_csv(tmp_path / sub / f"{name}.csv") for sub in ("r", "f"))
        assert len(ours) == len(theirs) > 0 and np.isfinite(ours[column]).all()
        np.testing.assert_array_equal(ours[column].to_numpy(), theirs[column].to_numpy())
    np.testing.assert_array_equal(report["param_beta"].to_numpy(), fit["param_beta"].to_numpy())
    # the figures are the likelihood in the world the options name, recomputed outside the CLI
    named = make_world(costs=costs, schedule=SCHEDULE)
    for _, row in report.iterrows():
        agent = make_agent("planned_choice", world=named, **MODELS[row["model"]][1])
        params = np.array([row[f"param_{n}"] for n in agent.param_specs()])
        trials = participant_trials(log, row["participant"])
        assert agent.likelihood_function(trials)(params) == pytest.approx(row["loglik"], rel=1e-9)


def test_the_costs_option_reaches_the_fitted_likelihood(study, tmp_path, capsys):
    _, _, path, schedule = study
    slow = _fits("report", path, schedule, tmp_path / "slow", "slow_typist_mouse")
    default = _fits("report", path, schedule, tmp_path / "default", None)
    capsys.readouterr()
    assert not np.allclose(slow["loglik"].to_numpy(), default["loglik"].to_numpy(), rtol=1e-6)
