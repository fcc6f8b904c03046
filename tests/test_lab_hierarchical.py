"""Hierarchical fitting of learning models to trial logs (checks against the truth that could fail).

The delta-rule model here is the composable learner with only its ``value`` mechanism: the
Rescorla-Wagner form with a softmax (alpha, beta), model 3 of Wilson & Collins (2019, eLife, "Ten
simple rules for the computational modeling of behavioral data").
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from shortcut_gym.agents.base import AgentContext
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.recovery import simulate_known
from shortcut_gym.lab.data.logs import participant_trials, validate_log
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_hierarchical, fit_log
from shortcut_gym.lab.fitting.hierarchical import _free_loglik

DELTA = ModelSpec("rescorla_wagner", label="delta_rule", options={"mechanisms": ["value"]})


@pytest.fixture(scope="module")
def few_trials():
    """16 simulated participants x 60 trials (2 sessions of 30), parameters drawn near the defaults."""
    world = make_world(schedule={"sessions": 2, "trials_per_session": 30})
    log, truth = simulate_known(world, DELTA, 16, np.random.default_rng(3))
    log = validate_log(log, world.commands)
    ctx = context_for(log, world.commands.names)
    return world, log, truth, ctx, fit_hierarchical(log, DELTA, ctx)


def test_hierarchical_estimates_shrink_below_per_participant_ml(few_trials):
    # measured on this data: MSE to the truth of alpha 0.011 (hierarchical) vs 0.051 (ML), of beta
    # 1.44 vs 791 (ML runs to the bound 50 for several participants); the bar is only "below ML"
    _, log, truth, ctx, fit = few_trials
    ml = fit_log(log, [DELTA], ctx, n_starts=3, seed=0)
    merged = truth.merge(fit.participant_table(), on="participant").merge(ml, on="participant",
                                                                          suffixes=("_h", "_ml"))
    assert len(merged) == 16
    for name in ("alpha", "beta"):
        mse_h = float(np.mean((merged[f"param_{name}_h"] - merged[name]) ** 2))
        mse_ml = float(np.mean((merged[f"param_{name}_ml"] - merged[name]) ** 2))
        assert mse_h < mse_ml, (name, mse_h, mse_ml)


def test_each_map_beats_the_truth_under_the_fitted_prior(few_trials):
    world, log, truth, _, fit = few_trials
    for pid, post in zip(fit.participants, fit.em.posteriors, strict=True):
        trials = participant_trials(log, pid)
        f, specs = _free_loglik(DELTA, trials, AgentContext(world.commands.n_commands, len(trials),
                                                            world.commands.names))
        row = truth.set_index("participant").loc[pid]
        x_true = np.array([specs[n].to_free(float(row[n])) for n in specs])

        def log_post(x, f=f):
            d = x - fit.em.mean
            return f(x) - 0.5 * d @ np.linalg.solve(fit.em.cov, d)

        assert log_post(post.mode) >= log_post(x_true) - 1e-6
        assert post.loglik == pytest.approx(f(post.mode))


def test_tables_and_integrated_bic(few_trials):
    _, _, _, _, fit = few_trials
    em = fit.em
    assert em.converged and em.iterations < 200
    assert abs(em.history[-1] - em.history[-2]) < 0.01
    group = fit.group_table()
    assert list(group["parameter"]) == ["alpha", "beta"]
    assert (group["sd_free"] > 0).all() and (group["low_95"] < group["median"]).all()
    assert (group["median"] < group["high_95"]).all()
    # a fixed point: one more M step would barely move the group mean
    np.testing.assert_allclose(group["mean_free"], np.mean([p.mode for p in em.posteriors], axis=0), atol=0.05)
    per = fit.participant_table()
    assert len(per) == 16 and (per[["sd_alpha", "sd_beta", "free_sd_alpha"]] > 0).all().all()
    assert ((per["param_alpha"] > 0) & (per["param_alpha"] < 1)).all()
    # iBIC = -2 ln p(D | group) + 2k ln(total trials) for a diagonal prior (Huys et al. 2011)
    assert fit.ibic == pytest.approx(-2.0 * per["log_evidence"].sum() + 4 * math.log(16 * 60))
    assert fit.summary()["n_group_params"] == 4


def test_bad_requests_are_refused(few_trials):
    _, log, _, ctx, _ = few_trials
    one = log[log["participant"] == log["participant"].iloc[0]]
    with pytest.raises(ValueError, match="at least 2 participants"):
        fit_hierarchical(one, DELTA, ctx)
    with pytest.raises(ValueError, match="covariance"):
        fit_hierarchical(log, DELTA, ctx, covariance="banded")


def test_cli_fit_hierarchical_writes_its_tables(few_trials, tmp_path, capsys):
    import pandas as pd

    from shortcut_gym.lab.cli import main
    from shortcut_gym.lab.data.logs import write_log

    _, log, _, _, fit = few_trials
    path = write_log(log.drop(columns=["command_index"]), tmp_path / "log.csv")
    out = tmp_path / "f"
    assert main(["fit", str(path), "--model", "delta_rule=rescorla_wagner", "--starts", "1",
                 "--out", str(out), "--quiet", "--hierarchical"]) == 0
    summary = pd.read_csv(out / "hierarchical.csv")
    assert list(summary["model"]) == ["delta_rule"]
    assert summary["ibic"].iloc[0] == pytest.approx(fit.ibic, rel=1e-6)
    group = pd.read_csv(out / "hierarchical_group.csv")
    np.testing.assert_allclose(group["mean_free"], fit.em.mean, rtol=1e-6)
    per = pd.read_csv(out / "hierarchical_participants.csv")
    assert len(per) == 16 and "sd_alpha" in per.columns
    assert "ibic" in capsys.readouterr().out
    assert main(["fit", str(path), "--model", "static_softmax", "--out", str(out), "--hierarchical",
                 "--covariance", "banded"]) == 2


def test_laplace_evidence_matches_sampling_the_fitted_prior(few_trials):
    # Huys et al. (2011) estimate ln p(D_i | group) by sampling the prior; the Laplace evidence must
    # agree on a learning model. Measured: per-participant gaps below 0.07 nats (within about 3
    # standard errors of 4,000 draws), summed gap 0.12 nats
    fit = few_trials[-1]
    sampled, se = fit.sampled_evidence(draws=4000, seed=1)
    laplace = np.array([p.log_evidence for p in fit.em.posteriors])
    assert np.all(np.abs(laplace - sampled) < 4 * se + 0.05), (laplace - sampled, se)
    # summed: the per-participant allowance added up (the Laplace bias of 0.05 nats each and the
    # sampling error of the sum)
    assert abs(laplace.sum() - sampled.sum()) < 4 * np.sqrt(np.sum(se**2)) + 0.05 * len(laplace)


def test_report_takes_the_group_covariance_fit_takes(few_trials, tmp_path, capsys):
    import pandas as pd

    from shortcut_gym.lab.cli import main
    from shortcut_gym.lab.data.logs import write_log

    _, log, _, _, _ = few_trials
    keep = log["participant"].isin(log["participant"].unique()[:6])
    small = log[keep]
    path = write_log(small.drop(columns=["command_index"]), tmp_path / "log.csv")
    models = ["--model", "delta_rule=rescorla_wagner:mechanisms=[value]", "--model", "static_softmax"]
    common = [str(path), *models, "--starts", "1", "--quiet", "--hierarchical"]
    tables = {}
    for sub, covariance in (("fit", "full"), ("report", "full"), ("report", "diagonal")):
        out = tmp_path / f"{sub}_{covariance}"
        extra = ["--sims", "1"] if sub == "report" else []
        assert main([sub, *common, *extra, "--covariance", covariance, "--out", str(out)]) == 0
        tables[sub, covariance] = pd.read_csv(out / "hierarchical.csv").set_index("model").sort_index()
    report_index = (tmp_path / "report_full" / "index.md").read_text()
    capsys.readouterr()
    pd.testing.assert_frame_equal(tables["report", "full"], tables["fit", "full"])
    # the full-covariance fit itself, outside the CLI: k means, k SDs and k(k-1)/2 correlations
    direct = fit_hierarchical(validate_log(small, few_trials[0].commands), DELTA,
                              context_for(small, few_trials[0].commands.names), n_starts=1, covariance="full")
    assert tables["report", "full"].loc["delta_rule", "ibic"] == pytest.approx(direct.ibic, rel=1e-9)
    assert tables["report", "full"].loc["delta_rule", "n_group_params"] == 2 + 2 + 1
    assert tables["report", "diagonal"].loc["delta_rule", "n_group_params"] == 2 + 2
    assert "(full covariance)" in report_index


@pytest.mark.parametrize("sub", ["fit", "report"])
def test_covariance_without_hierarchical_is_refused_naming_both(few_trials, tmp_path, capsys, sub):
    from shortcut_gym.lab.cli import main
    from shortcut_gym.lab.data.logs import write_log

    path = write_log(few_trials[1].drop(columns=["command_index"]), tmp_path / "log.csv")
    out = tmp_path / "out"
    assert main([sub, str(path), "--model", "static_softmax", "--covariance", "full", "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "--covariance full" in err and "--hierarchical" in err
    assert not out.exists()  # refused before the output folder is claimed
