"""The report's verdict across per-participant BIC, BMS, iBIC and held-out log-likelihood."""

from __future__ import annotations

import numpy as np
import pandas as pd

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.compare import random_effects_bms
from shortcut_gym.lab.report.criteria_verdict import WHY_THEY_PART, agreement_words, criterion_winners

SUMMED = pd.DataFrame({"model": ["a", "b"], "bic": [100.0, 130.5], "wins_bic": [6, 2]})
CLEAR_A = random_effects_bms(np.array([[0.0, -20.0]] * 8), ["a", "b"])


def test_all_criteria_agree():
    ibic = pd.DataFrame({"model": ["b", "a"], "ibic": [90.0, 80.0]})
    cv = pd.DataFrame({"model": ["a", "b"], "heldout_loglik": [-40.0, -55.0]})
    winners = criterion_winners(SUMMED, CLEAR_A, ibic, cv)
    assert winners == {"summed BIC": "a", "participants' BIC": "a", "BMS": "a", "iBIC": "a", "held-out ln L": "a"}
    words = agreement_words(winners)
    assert words.startswith("The criteria agree") and "**a**" in words and WHY_THEY_PART not in words


def test_disagreement_is_said_in_words_naming_each_side():
    ibic = pd.DataFrame({"model": ["a", "b"], "ibic": [95.0, 80.0]})  # iBIC prefers b
    cv = pd.DataFrame({"model": ["a", "b"], "heldout_loglik": [-60.0, -50.0]})  # so does held-out ln L
    words = agreement_words(criterion_winners(SUMMED, CLEAR_A, ibic, cv))
    assert words.startswith("The criteria disagree")
    assert "summed BIC and participants' BIC and BMS prefer **a**" in words
    assert "iBIC and held-out ln L prefer **b**" in words
    assert WHY_THEY_PART in words


def test_no_leader_is_reported_not_counted_as_a_side():
    split = random_effects_bms(np.array([[0.0, -20.0]] * 4 + [[-20.0, 0.0]] * 4), ["a", "b"])
    tied = SUMMED.assign(wins_bic=[4, 4])
    winners = criterion_winners(tied, split)
    assert winners["BMS"] is None and winners["participants' BIC"] is None
    assert "iBIC" not in winners and "held-out ln L" not in winners  # not computed, not claimed
    words = agreement_words(winners)
    assert words.startswith("The criteria agree: summed BIC all prefer **a**")
    assert "(participants' BIC, BMS: no model leads)" in words


def test_report_cli_weighs_hierarchical_and_held_out_criteria(tmp_path, capsys):
    from shortcut_gym.envs.world import make_world
    from shortcut_gym.lab.checks.recovery import simulate_known
    from shortcut_gym.lab.cli import main
    from shortcut_gym.lab.data.logs import write_log
    from shortcut_gym.lab.fitting import ModelSpec

    world = make_world(schedule={"sessions": 2, "trials_per_session": 25})
    ck = ModelSpec("choice_kernel", label="ck", options={"mechanisms": ["choice_kernel"]})
    log, _ = simulate_known(world, ck, 3, np.random.default_rng(4), {"alpha_ck": (0.2, 0.4), "beta_ck": (3.0, 5.0)})
    path = write_log(log, tmp_path / "log.csv")
    out = tmp_path / "r"
    assert main(["report", str(path), "--model", "ck=choice_kernel",
                 "--model", "rw=rescorla_wagner", "--starts", "2", "--sims", "2",
                 "--out", str(out), "--quiet", "--hierarchical", "--cross-validate"]) == 0
    index = (out / "index.md").read_text()
    for heading in ("## Verdict", "## Hierarchical fit", "## Cross-validated comparison"):
        assert heading in index
    verdict = index[index.index("## Verdict"):index.index("## Summed criteria")]
    assert "The criteria agree" in verdict or "The criteria disagree" in verdict
    assert "iBIC" in verdict and "held-out ln L" in verdict
    for name in ("hierarchical", "hierarchical_group", "hierarchical_participants", "cv_folds", "cv"):
        assert (out / f"{name}.csv").is_file()
    ibic = pd.read_csv(out / "hierarchical.csv")
    assert set(ibic["model"]) == {"ck", "rw"} and np.isfinite(ibic["ibic"]).all()


def test_a_report_of_one_model_is_refused_before_any_fit(tmp_path, capsys, monkeypatch) -> None:
    import shortcut_gym.lab.report.analysis as analysis
    from shortcut_gym.lab.cli import main
    from shortcut_gym.lab.data.logs import write_log
    from shortcut_gym.lab.simulate import simulate_agents

    world = make_world(schedule={"sessions": 2, "trials_per_session": 10})
    trials = simulate_agents(world, [{"name": "always_menu"}], [1, 2])
    log = trials.assign(participant=trials["user"].astype(str), command=trials["command_name"])
    path = write_log(log.drop(columns=["agent", "user"]), tmp_path / "log.csv")

    def no_fit(*args, **kwargs):
        raise AssertionError("a fit ran before the refusal")

    monkeypatch.setattr(analysis, "fit_log", no_fit)
    code = main(["report", str(path), "--model", "rescorla_wagner", "--sessions", "2", "--out", str(tmp_path / "r")])
    assert code == 2
    err = capsys.readouterr().err
    assert "give at least two models, got ['rescorla_wagner']" in err and "fit fits a single model" in err
