"""The rationality analysis: choices against the yardstick planner in each participant's own world."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.planned_choice import cached_plan
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.checks.recovery import model_recovery, parameter_recovery
from shortcut_gym.lab.data.logs import participant_trials, schedule_of, validate_log
from shortcut_gym.lab.fitting import ModelSpec
from shortcut_gym.lab.rationality import rationality_analysis

SCHEDULE = {"sessions": 4, "trials_per_session": 40}


@pytest.fixture(scope="module")
def world():
    return make_world(schedule=SCHEDULE)


@pytest.fixture(scope="module")
def analysed(world):
    rng = np.random.default_rng(0)
    planner = make_agent("bounded_optimal", world=world, n_bins=20, n_weight_bins=5, select_users=0)
    log = pd.concat([simulate_log(world, planner, 1, rng, prefix="plan"),
                     simulate_log(world, make_agent("always_menu"), 1, rng, prefix="menu")], ignore_index=True)
    log = validate_log(log, world.commands)
    return log, rationality_analysis(log, world, [ModelSpec("rescorla_wagner")], n_starts=2, n_sims=24)


def test_the_planner_itself_loses_no_time_and_always_chooses_optimally(analysed):
    _, res = analysed
    me = res.participants.set_index("participant").loc["plan-0"]
    assert me["q_time_lost_s"] == 0.0
    assert me["optimal_share"] == 1.0
    assert res.trials.loc[res.trials["participant"] == "plan-0", "optimal"].all()
    # its simulated time lost is luck only (its recall draws): within 3 SD of one simulated user's
    # total, the SE being that SD / sqrt(24 simulations)
    assert me["n_sims"] == 24
    assert me["simulated_time_lost_se"] == pytest.approx(me["optimum_time_sd_s"] / np.sqrt(24))
    assert abs(me["simulated_time_lost_s"]) < 3 * me["optimum_time_sd_s"]


def test_always_menu_loses_what_the_planner_predicts_on_its_schedule(analysed, world):
    log, res = analysed
    me = res.participants.set_index("participant").loc["menu-0"]
    trials = participant_trials(log, "menu-0")
    # the planner's predicted loss, by an independent path: the Gymnasium env replaying the schedule
    env = CommandSelectionEnv(world=world)
    planner = cached_plan(world, None, 20, 5, 0)
    totals = []
    for seed in range(24):
        env.reset(seed=1000 + seed, options={"schedule": schedule_of(trials)})
        totals.append(run_episode_on_reset(env, planner, seed))
    predicted = trials["duration_s"].sum() - np.mean(totals)
    se = np.std(totals, ddof=1) / np.sqrt(len(totals))
    assert predicted > 20.0
    assert me["simulated_time_lost_s"] == pytest.approx(predicted, abs=4 * np.hypot(se, me["simulated_time_lost_se"]))
    assert me["q_time_lost_s"] > 0 and me["optimal_share"] < 1.0
    assert me["commands_learned"] == 0


def run_episode_on_reset(env, agent, seed):
    """Total seconds of one episode of ``agent`` on an env already reset with a replayed schedule."""
    from shortcut_gym.agents.base import Transition

    agent.reset(seed)
    obs, info = env.unwrapped._sim.obs[0].copy(), env.unwrapped._upcoming_info()
    total, done = 0.0, False
    while not done:
        a = agent.act(obs, info)
        nxt, r, term, trunc, step = env.step(a)
        agent.observe(Transition(obs, a, r, nxt, step, term, trunc))
        total -= r
        obs, info, done = nxt, step, term or trunc
    return total


def test_commands_say_where_learning_pays_and_the_group_table_has_the_figures(analysed):
    _, res = analysed
    cmd = res.commands
    assert set(cmd["participant"]) == {"plan-0", "menu-0"}
    assert cmd["learning_pays"].any() and not cmd["learning_pays"].all()
    assert not cmd.loc[cmd["participant"] == "menu-0", "learned"].any()
    # learning pays where the optimum itself learns or uses the hotkey on the participant's history
    trials = res.trials
    for (pid, c), row in cmd.set_index(["participant", "command"]).iterrows():
        mine = trials[(trials["participant"] == pid) & (trials["command"] == c)]
        assert row["learning_pays"] == (mine["optimal_action"] != "menu").any(), (pid, c)
    # so the planner's own participant never "learned where learning does not pay"
    plan = cmd[cmd["participant"] == "plan-0"]
    assert plan["learned"].any() and not (plan["learned"] & ~plan["learning_pays"]).any()
    assert {"break_even_pays", "break_even_uses"} <= set(cmd.columns)
    figures = set(res.group["figure"])
    assert {"mean simulated_time_lost_s", "mean q_time_lost_s", "mean optimal_share", "median beta"} <= figures
    assert {"joint_loglik", "joint_bic"} <= set(res.fits.columns)
    beta = res.participants.set_index("participant")
    assert beta.loc["plan-0", "beta_low"] > beta.loc["menu-0", "beta_high"]


def test_inverse_temperature_is_recovered(world):
    spec = ModelSpec("planned_choice", options={"world": world})
    pairs, summary = parameter_recovery(world, spec, n_participants=14, seed=3, n_starts=2,
                                        ranges={"beta": (0.1, 3.0)})
    beta = pairs[pairs["parameter"] == "beta"]
    r_log = np.corrcoef(np.log(beta["true"]), np.log(np.maximum(beta["fitted"], 1e-3)))[0, 1]
    assert summary.set_index("parameter").loc["beta", "correlation"] >= 0.8
    assert r_log >= 0.8, r_log


def test_planned_choice_and_the_delta_rule_are_told_apart(world):
    specs = [ModelSpec("planned_choice", options={"world": world}), ModelSpec("rescorla_wagner")]
    confusion, _ = model_recovery(world, specs, n_participants=10, seed=5, n_starts=2,
                                  ranges={"planned_choice": {"beta": (0.3, 6.0)},
                                          # delta-rule participants whose choices are not near uniform
                                          "rescorla_wagner": {"beta": (1.0, 10.0)}})
    assert confusion.loc["planned_choice", "planned_choice"] >= 0.85
    assert confusion.loc["rescorla_wagner", "rescorla_wagner"] >= 0.85


@pytest.fixture()
def small_case(tmp_path):
    """A 2 x 30-trial scenario file and a log of two delta-rule users on it."""
    import yaml

    from shortcut_gym.envs.config import bundled_config_dir
    from shortcut_gym.lab.data.logs import write_log

    scenario = yaml.safe_load((bundled_config_dir() / "scenarios" / "tidepool_logbook.yaml").read_text())
    scenario["schedule"].update(sessions=2, trials_per_session=30)
    path = tmp_path / "small.yaml"
    path.write_text(yaml.safe_dump(scenario))
    log = simulate_log(make_world(path), ModelSpec("rescorla_wagner"), 2, np.random.default_rng(1))
    return path, log, write_log(log, tmp_path / "log.csv")


def test_yardstick_cli_writes_the_folder_and_refuses_planned_choice_as_a_learning_model(tmp_path, capsys,
                                                                                       small_case):
    from shortcut_gym.lab.cli import main

    path, _, log_path = small_case
    out = tmp_path / "out"
    code = main(["yardstick", str(log_path), "--scenario", str(path), "--out", str(out), "--starts", "1",
                 "--optimum-sims", "4", "--quiet"])
    assert code == 0
    assert (out / "rationality_participants.csv").is_file() and (out / "time_lost.png").is_file()
    assert "Rationality against each participant's own optimum" in (out / "index.md").read_text()
    assert "sim-1" in capsys.readouterr().out
    assert main(["yardstick", str(log_path), "--scenario", str(path), "--out", str(out), "--model",
                 "planned_choice"]) == 2
    assert "is the model every learning model is compared with" in capsys.readouterr().err


def test_report_rationality_adds_the_yardstick_section_with_the_simulated_headline(tmp_path, capsys, small_case):
    from shortcut_gym.lab.cli import main

    path, log, log_path = small_case
    common = [str(log_path), "--scenario", str(path), "--starts", "1", "--optimum-sims", "8", "--quiet"]
    models = ["--model", "static_softmax", "--model", "rescorla_wagner"]
    assert main(["yardstick", *common, *models, "--out", str(tmp_path / "alone")]) == 0
    assert main(["report", *common, *models, "--sims", "2", "--rationality", "--out", str(tmp_path / "report")]) == 0
    index = (tmp_path / "report" / "index.md").read_text()
    assert "## Rationality against each participant's own optimum" in index and "simulated_time_lost_s" in index
    assert "rationality_participants.csv" in index and "time_lost.png" in index
    per = pd.read_csv(tmp_path / "report" / "rationality_participants.csv", dtype={"participant": str})
    alone = pd.read_csv(tmp_path / "alone" / "rationality_participants.csv", dtype={"participant": str})
    # the report's section is the yardstick's analysis with the same options and seed
    pd.testing.assert_frame_equal(per, alone)
    # the headline is the log's own total per participant minus the planner's simulated mean
    totals = log.groupby("participant")["duration_s"].sum()
    np.testing.assert_allclose(per["observed_time_s"], totals.loc[per["participant"]].to_numpy(), rtol=1e-12)
    np.testing.assert_allclose(per["simulated_time_lost_s"], per["observed_time_s"] - per["optimum_time_s"])
    assert (per["simulated_time_lost_se"] > 0).all() and (per["n_sims"] == 8).all()
    # the verdict says that it leaves planned_choice out and what the rationality section finds for it
    verdict = index.split("## Verdict", 1)[1].split("\n## ", 1)[0]
    group = pd.read_csv(tmp_path / "report" / "rationality_group.csv").set_index("figure")["value"]
    count = int(group["participants better explained by planned_choice (BIC)"])  # a count, not a share
    assert "compares the `--model` models only" in verdict and f"{count} of {len(per)} participants" in verdict
    # the rationality choice fits have their own fit-quality section, listing every doubtful one
    fits = pd.read_csv(tmp_path / "report" / "rationality_fits.csv", dtype={"participant": str})
    quality = index.split("## Fit quality (rationality choice fits)", 1)[1].split("\n## ", 1)[0]
    for _, bad in fits[~fits["fit_ok"]].iterrows():
        assert bad["participant"] in quality and bad["model"] in quality
    # without the flag the report has no such section
    assert main(["report", *common, *models, "--sims", "2", "--out", str(tmp_path / "plain")]) == 0
    assert "Rationality" not in (tmp_path / "plain" / "index.md").read_text()
    assert not (tmp_path / "plain" / "rationality_participants.csv").exists()
    capsys.readouterr()


def test_participants_whose_durations_cannot_show_an_operator_are_named_with_it(analysed, world, tmp_path):
    from shortcut_gym.lab.fitting.durations import fit_durations
    from shortcut_gym.lab.rationality.report import write_rationality

    log, res = analysed
    per = res.participants.set_index("participant")
    for pid in per.index:  # the column lists exactly the operators the duration fit could not identify
        dfit = fit_durations(participant_trials(log, pid), world, "lognormal", pid)
        assert per.loc[pid, "held_operators"] == ";".join(n for n, ok in dfit.identified.items() if not ok)
    # always-menu never pressed a key: its keystroke time is the study's, and the page says so
    assert "keystroke_s" in per.loc["menu-0", "held_operators"].split(";")
    _, sections = write_rationality(res, tmp_path)
    text = dict(sections)["Participants judged partly on the study's operator times"]
    assert "`menu-0`" in text and "keystroke_s" in text
    listed = {line.split("`")[1] for line in text.splitlines() if line.startswith("- `")}
    assert listed == {p for p in per.index if per.loc[p, "held_operators"]}


def test_the_rationality_plots_leave_the_global_backend_alone(analysed, tmp_path):
    import subprocess
    import sys

    _, res = analysed
    res.participants.to_pickle(tmp_path / "per.pkl")
    code = (
        "import matplotlib, sys; matplotlib.use('svg'); import pandas as pd; "
        "from shortcut_gym.lab.rationality.report import plot_rationality_index, plot_time_lost; "
        f"per = pd.read_pickle({str(tmp_path / 'per.pkl')!r}); "
        f"plot_time_lost(per, __import__('pathlib').Path({str(tmp_path / 't.png')!r})); "
        f"plot_rationality_index(per, __import__('pathlib').Path({str(tmp_path / 'r.png')!r})); "
        "print(matplotlib.get_backend(), 'matplotlib.pyplot' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split()
    assert out == ["svg", "False"]
    assert (tmp_path / "t.png").stat().st_size > 1000 and (tmp_path / "r.png").stat().st_size > 1000
