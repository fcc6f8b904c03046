"""Demo section: was each volunteer bounded-optimal given their own typing speed and memory?

An invented group of Tidepool Logbook volunteers who differ in typing skill (KLM keystroke time,
Card, Moran & Newell 1980: 0.12 s good typist .. 0.50 s typing random letters) and in memory (the
ACT-R retrieval latency factor F and the retrieval threshold; values of this demo, no source), and
choose in different ways: near the planner (high inverse temperature), noisily around it, by a
delta rule, or always by menu. Their logged times carry lognormal trial-time noise (CV 0.08).
The analysis fits each volunteer's operator times to their own durations, plans for the world they
imply and scores their choices against it. Limitation shown on purpose: the recall dynamics
(threshold, decay) are the base world's in the analysis, so the forgetful volunteer's worse recall
appears as behaviour, not as a cost.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from shortcut_gym.agents import make_agent
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import validate_log, write_log
from shortcut_gym.lab.fitting import ModelSpec, implied_world
from shortcut_gym.lab.rationality import rationality_analysis
from shortcut_gym.lab.rationality.report import write_rationality
from shortcut_gym.lab.report.markdown import write_index

#: (pseudonym, keystroke_s, latency_factor_s, retrieval threshold, how they choose)
VOLUNTEERS = (
    ("fast-typist-planner", 0.12, 0.04, -3.5, "sharp"),
    ("slow-typist-planner", 0.50, 0.05, -3.5, "sharp"),
    ("forgetful-noisy", 0.20, 0.09, -2.5, "noisy"),
    ("delta-rule", 0.28, 0.05, -3.5, "delta"),
    ("menu-only", 0.20, 0.05, -3.5, "menu"),
)


def volunteer_log(base, rng: np.random.Generator) -> pd.DataFrame:
    """The invented group's trial log (each volunteer simulated in their own true world)."""
    frames = []
    for name, k_s, f_s, tau, style in VOLUNTEERS:
        world = implied_world(base, {"keystroke_s": k_s, "latency_factor_s": f_s})
        world = world.with_changes(memory=world.memory.model_copy(update={"threshold": tau}))
        agent = {"sharp": make_agent("planned_choice", world=world, beta=20.0),
                 "noisy": make_agent("planned_choice", world=world, beta=0.7),
                 "delta": ModelSpec("rescorla_wagner"),
                 "menu": make_agent("always_menu")}[style]
        frames.append(simulate_log(world, agent, 1, rng, prefix=name))
    log = pd.concat(frames, ignore_index=True)
    log["participant"] = log["participant"].str.replace("-0", "", regex=False)
    return log


def rationality_section(out: Path) -> pd.DataFrame:
    """Simulate the group, run the yardstick analysis, write ``out/rationality/``; print the verdicts."""
    base = make_world(schedule={"sessions": 3, "trials_per_session": 40}, costs={"noise": {"cv": 0.08}})
    log = validate_log(volunteer_log(base, np.random.default_rng(11)), base.commands)
    folder = out / "rationality"
    folder.mkdir(parents=True, exist_ok=True)
    write_log(log, folder / "volunteers_log.csv")
    result = rationality_analysis(log, base, [ModelSpec("rescorla_wagner")], n_starts=2, n_sims=64)
    entries, sections = write_rationality(result, folder)
    write_index(folder, entries, "Tidepool Logbook volunteers against their own optimum", sections)
    se = result.durations.set_index("participant")[["se_keystroke_s", "se_latency_factor_s"]]
    per = result.participants.join(se, on="participant")
    cols = ["participant", "own_keystroke_s", "se_keystroke_s", "own_latency_factor_s", "se_latency_factor_s",
            "simulated_time_lost_s", "simulated_time_lost_se", "q_time_lost_s",
            "optimal_share", "beta", "beta_low", "beta_high", "better_model"]
    print("\n== Were the volunteers bounded-optimal given their own costs? (Tidepool Logbook, invented group)")
    print(per[cols].to_string(index=False, float_format=lambda v: f"{v:.3g}"))
    return per
