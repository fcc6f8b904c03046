"""Fitting, recovery, comparison and CLI of the lab (checks that could fail)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.checks.recovery import knockout_variants, model_recovery, parameter_recovery
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.cli.options import parse_model, parse_prior
from shortcut_gym.lab.compare import random_effects_bms, summed_criteria
from shortcut_gym.lab.data.logs import write_log
from shortcut_gym.lab.fitting import ModelSpec

WORLD = make_world()
STATIC = ModelSpec("static_softmax")


def test_parameter_recovery_static_softmax():
    # 30 simulated participants x 400 trials, true values within +-1 logit unit of 0. Threshold
    # r > 0.7 for every parameter: a common bar for acceptable recovery (common practice, no
    # source); the intercepts are the weakest (they are pinned by the few trials at exposure 0).
    # Bias must be small against the spread of the true values (|bias| < 0.25 sd). Wider ranges
    # (b_learn near -3) make learning so rare that some simulated people never learn and the MLE
    # runs to the box edge: recovery then fails.
    ranges = {n: (-1.0, 1.0) for n in STATIC.free_parameters()}
    _, summary = parameter_recovery(WORLD, STATIC, n_participants=30, seed=11, n_starts=2, ranges=ranges)
    assert set(summary["parameter"]) == set(STATIC.free_parameters())
    for _, row in summary.iterrows():
        assert row["correlation"] > 0.7, row.to_dict()
        assert abs(row["bias"]) < 0.25 * row["true_sd"], row.to_dict()


def test_model_recovery_diagonal_dominates():
    specs = [STATIC, ModelSpec("choice_kernel"), ModelSpec("rescorla_wagner")]
    confusion, fits = model_recovery(WORLD, specs, n_participants=4, seed=2, n_starts=2)
    assert set(fits["generator"]) == {s.label for s in specs}
    # dominance: each row's diagonal entry is strictly the largest, and the mean diagonal is well
    # above chance (1/3 for three models)
    for label in confusion.index:
        row = confusion.loc[label]
        assert (row.drop(label) < row[label]).all(), confusion
    assert np.mean(np.diag(confusion.to_numpy())) > 0.6, confusion


def test_fit_is_the_same_with_two_processes():
    log = simulate_log(WORLD, ModelSpec("choice_kernel"), 3, np.random.default_rng(4))
    from shortcut_gym.lab.data.logs import validate_log
    from shortcut_gym.lab.fitting import context_for, fit_log

    log = validate_log(log, WORLD.commands)
    ctx = context_for(log, WORLD.commands.names)
    a = fit_log(log, [STATIC, ModelSpec("choice_kernel")], ctx, n_starts=2, seed=5, n_jobs=1)
    b = fit_log(log, [STATIC, ModelSpec("choice_kernel")], ctx, n_starts=2, seed=5, n_jobs=2)
    pd.testing.assert_frame_equal(a, b)


def test_map_pulls_toward_the_prior():
    log = simulate_log(WORLD, ModelSpec("static_softmax", fixed={"b_hotkey": -1.0}), 1, np.random.default_rng(8))
    from shortcut_gym.lab.data.logs import validate_log
    from shortcut_gym.lab.fitting import context_for, fit_log

    log = validate_log(log, WORLD.commands)
    ctx = context_for(log, WORLD.commands.names)
    ml = fit_log(log, [STATIC], ctx, n_starts=2)
    _, tight = parse_prior("b_hotkey=normal:5:0.01")
    mp = fit_log(log, [STATIC], ctx, n_starts=2, priors={"static_softmax": {"b_hotkey": tight}})
    assert abs(mp["param_b_hotkey"].iloc[0] - 5.0) < 0.1
    assert mp["loglik"].iloc[0] < ml["loglik"].iloc[0]


def test_bms_prefers_the_model_with_more_evidence():
    lme = np.column_stack([np.zeros(10), np.full(10, -20.0)])
    res = random_effects_bms(lme, ["good", "bad"])
    assert res.expected_frequency[0] > 0.85 and res.exceedance[0] > 0.99
    assert res.protected_exceedance[0] < res.exceedance[0] + 1e-12


def test_summed_criteria_sum_per_participant_rows():
    fits = pd.DataFrame({"participant": ["a", "a", "b", "b"], "model": ["m", "n", "m", "n"],
                         "loglik": [-10.0, -12.0, -5.0, -4.0], "n_params": [1, 2, 1, 2], "n_trials": [20] * 4})
    fits["aic"] = 2 * fits["n_params"] - 2 * fits["loglik"]
    fits["bic"] = fits["n_params"] * np.log(20) - 2 * fits["loglik"]
    s = summed_criteria(fits).set_index("model")
    assert s.loc["m", "bic"] == pytest.approx(fits.loc[[0, 2], "bic"].sum())
    assert s.loc["m", "wins_bic"] == 2


def test_knockout_variants_drop_one_mechanism_each():
    spec = ModelSpec("composed_learner", options={"mechanisms": ["choice_kernel", "perseveration", "lapse"]})
    variants = knockout_variants(spec)
    names = [m for m, _ in variants]
    assert names == ["perseveration", "lapse"]  # choice_kernel itself cannot go: nothing would choose
    for m, v in variants:
        assert m not in v.options["mechanisms"]
    # a published model knocks out into the published models nested in it
    nested = {m: v.build().param_specs().keys() for m, v in knockout_variants(ModelSpec("rw_choice_kernel"))}
    assert list(nested["choice_kernel"]) == ["alpha", "beta"] and list(nested["value"]) == ["alpha_ck", "beta_ck"]
    with pytest.raises(ValueError, match="no mechanism that can be knocked out"):
        knockout_variants(ModelSpec("rescorla_wagner"))


def test_only_agents_built_from_mechanisms_are_composed_and_knocked_out():
    from shortcut_gym.agents.base import ComposedAgent
    from shortcut_gym.agents.registry import make_agent
    from shortcut_gym.envs.errors import ConfigError

    assert isinstance(make_agent("rw_choice_kernel"), ComposedAgent)
    assert not any(isinstance(make_agent(n), ComposedAgent) for n in ("always_menu", "static_softmax", "q_learning"))
    with pytest.raises(ConfigError, match="no switchable mechanisms"):
        knockout_variants(ModelSpec("static_softmax"))


def test_parse_model_errors_and_options():
    spec = parse_model("two=static_softmax:covariates=[log_exposure,session],b_learn=-3")
    assert spec.label == "two" and spec.fixed == {"b_learn": -3.0}
    assert spec.options == {"covariates": ["log_exposure", "session"]}
    one = parse_model("v=composed_learner:mechanisms=[value],alpha=0.2")
    assert one.options == {"mechanisms": ["value"]} and one.fixed == {"alpha": 0.2}
    for bad, message in [("composed_learner:mechanisms=[value,lapse", "unclosed bracket"),
                         ("composed_learner:mechanisms=value]", "unbalanced"),
                         ("composed_learner:mechanisms=[value,,lapse]", "not valid YAML"),
                         ("rescorla_wagner:alpha=0.2,alpha=0.3", "given twice")]:
        with pytest.raises(ValueError, match=message):
            parse_model(bad)
    with pytest.raises(ValueError, match="unknown agent 'nope'"):
        parse_model("nope")
    with pytest.raises(ValueError, match="must look like key=value"):
        parse_model("static_softmax:b_learn")


def test_cli_fit_compare_and_errors(tmp_path, capsys):
    log = simulate_log(WORLD, STATIC, 2, np.random.default_rng(1))
    path = write_log(log, tmp_path / "log.csv")
    assert main(["fit", str(path), "--model", "static_softmax", "--model", "choice_kernel", "--starts", "1",
                 "--out", str(tmp_path / "f"), "--quiet"]) == 0
    fits = pd.read_csv(tmp_path / "f" / "fits.csv")
    assert len(fits) == 4 and fits["converged"].all()
    assert main(["compare", str(tmp_path / "f" / "fits.csv"), "--out", str(tmp_path / "c")]) == 0
    assert (tmp_path / "c" / "bms.csv").is_file() and (tmp_path / "c" / "comparison.png").is_file()
    summed = pd.read_csv(tmp_path / "c" / "summed_criteria.csv")
    index = (tmp_path / "c" / "index.md").read_text()
    best, other = summed.sort_values("bic")["model"].tolist()
    assert f"Lowest summed BIC: **{best}**" in index and f"below {other})" in index
    assert index.index("## Verdict") < index.index("## Files")  # findings first, then the file list
    assert sum(line.startswith(f"| {best} |") for line in index.splitlines()) == 2  # summed and BMS tables
    capsys.readouterr()
    bad = log.copy()
    bad.loc[3, "action"] = "voice"
    bad_path = write_log(bad, tmp_path / "bad.csv")
    assert main(["fit", str(bad_path), "--model", "static_softmax", "--out", str(tmp_path / "g")]) == 2
    err = capsys.readouterr().err
    assert "bad.csv, row 4, column 'action': unknown action 'voice'" in err
    assert main(["fit", str(path), "--model", "static_softmax", "--starts", "0", "--out", str(tmp_path / "g")]) == 2
    assert "fit: error: argument --starts: must be a whole number >= 1, got 0" in capsys.readouterr().err


@pytest.mark.parametrize("sub", ["fit", "compare", "recover", "report"])
def test_cli_help(sub, capsys):
    with pytest.raises(SystemExit) as exit_:
        main([sub, "--help"])
    assert exit_.value.code == 0
    assert "--out" in capsys.readouterr().out


def test_markdown_table_formats_numbers_nan_and_pipes():
    from shortcut_gym.lab.report import markdown_table

    table = pd.DataFrame({"model": ["a|b", "c"], "bic": [1.23456, float("nan")], "n": [3, 4]})
    assert markdown_table(table, digits=1).splitlines() == [
        "| model | bic | n |",
        "|---|---:|---:|",
        "| a\\|b | 1.2 | 3 |",
        "| c | - | 4 |",
    ]


def test_cli_simulate_writes_a_log_that_fit_reads(tmp_path, capsys):
    from shortcut_gym.lab.data.logs import read_log

    path = tmp_path / "sim.parquet"
    assert main(["simulate", "--users", "2", "--seed", "3", "--agent", "static_softmax",
                 "--agent", "learn_first_k:k=1", "--log", str(path)]) == 0
    log = read_log(path, WORLD.commands)  # validates every row against the schema and the scenario
    assert sorted(log["participant"].unique()) == ["learn_first_k(k=1)-u3", "learn_first_k(k=1)-u4",
                                                   "static_softmax-u3", "static_softmax-u4"]
    assert len(log) == 4 * WORLD.horizon
    first = log[log["participant"] == "learn_first_k(k=1)-u3"]
    assert first.groupby("command")["action"].first().eq("learn").all()  # its first use of each command learns
    assert main(["fit", str(path), "--model", "static_softmax", "--starts", "1", "--out", str(tmp_path / "f"),
                 "--quiet"]) == 0
    assert len(pd.read_csv(tmp_path / "f" / "fits.csv")) == 4
    capsys.readouterr()
    assert main(["simulate", "--users", "1", "--log", str(tmp_path / "sim.txt")]) == 2
    assert "--log" in capsys.readouterr().err and not (tmp_path / "sim.txt").exists()


def test_verdict_names_the_leader_or_says_none_leads():
    from shortcut_gym.lab.report import comparison_sections

    summed = pd.DataFrame({"model": ["a", "b"], "bic": [100.0, 130.5]})
    clear = random_effects_bms(np.array([[0.0, -20.0]] * 8), ["a", "b"])
    verdict = dict(comparison_sections(summed, clear))["Verdict"]
    assert "Lowest summed BIC: **a** (30.5 below b)" in verdict
    assert f"**a** has the highest protected exceedance probability ({clear.protected_exceedance[0]:.2f}" in verdict
    split = random_effects_bms(np.array([[0.0, -20.0]] * 4 + [[-20.0, 0.0]] * 4), ["a", "b"])
    assert abs(split.protected_exceedance[0] - split.protected_exceedance[1]) < 0.01
    assert "no model leads (a, b are within 0.01" in dict(comparison_sections(summed, split))["Verdict"]
