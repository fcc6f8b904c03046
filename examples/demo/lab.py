"""Demo section of the lab's analysis job: synthetic log -> fit -> compare -> check -> report.

The participants are invented: simulated users of three known agents on the demo scenario
(Tidepool Logbook), with parameters drawn near each agent's defaults.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.recovery import model_recovery, parameter_recovery, simulate_known
from shortcut_gym.lab.data.logs import validate_log, write_log
from shortcut_gym.lab.fitting import ModelSpec
from shortcut_gym.lab.report import (
    analyse_log,
    model_recovery_section,
    parameter_recovery_section,
    plot_confusion,
    plot_parameter_recovery,
    write_table,
)

DEMO_MODELS = (
    ModelSpec("static_softmax", "static_softmax"),
    ModelSpec("rescorla_wagner", "rescorla_wagner"),
    ModelSpec("choice_kernel", "choice_kernel"),
    ModelSpec("rw_choice_kernel", "rw_choice_kernel"),
)


def synthetic_log(world, users: int, seed: int = 7) -> tuple[pd.DataFrame, pd.DataFrame]:
    """A log of ``users`` invented participants spread over the demo models (+ generating truth)."""
    rng = np.random.default_rng(seed)
    frames, truths = [], []
    for j, spec in enumerate(DEMO_MODELS):
        n = users // len(DEMO_MODELS) + (1 if j < users % len(DEMO_MODELS) else 0)
        if n == 0:
            continue
        log, truth = simulate_known(world, spec, n, rng, prefix=f"tide{j}")
        truth.insert(1, "generator", spec.label)
        frames.append(log)
        truths.append(truth)
    return pd.concat(frames, ignore_index=True), pd.concat(truths, ignore_index=True)


def lab_section(out: Path, users: int) -> Path:
    """Fit the four demo models to a synthetic log, compare them, run a small recovery study.

    Prints the comparison and returns the report folder (``out/lab_report``).
    """
    world = make_world()
    folder = out / "lab_report"
    folder.mkdir(parents=True, exist_ok=True)
    log, truth = synthetic_log(world, max(users, 3))
    write_log(log, folder / "synthetic_log.csv")
    write_table(truth, folder, "synthetic_truth")
    log = validate_log(log, world.commands, source="synthetic log")
    specs = list(DEMO_MODELS)
    pairs, summary = parameter_recovery(world, specs[0], n_participants=12, seed=1, n_starts=2, n_jobs=1)
    confusion, _ = model_recovery(world, specs, n_participants=3, seed=2, n_starts=2, n_jobs=2)
    entries = [
        (folder / "synthetic_log.csv", "the invented participants' trial log"),
        (folder / "synthetic_truth.csv", "their generating models and parameters"),
        (write_table(summary, folder, f"parameter_recovery_{specs[0].label}"),
         f"parameter recovery of {specs[0].label} (12 simulated participants)"),
        (plot_parameter_recovery(pairs, summary, folder / f"parameter_recovery_{specs[0].label}.png"),
         "true vs fitted scatter"),
        (write_table(confusion, folder, "model_confusion", index=True),
         "model recovery (3 simulated participants per model)"),
        (plot_confusion(confusion, folder / "model_confusion.png"), "confusion heat map"),
    ]
    sections = [parameter_recovery_section(specs[0].label, summary), model_recovery_section(confusion)]
    index, tables = analyse_log(log, specs, world, folder, n_starts=3, seed=0, n_jobs=2, n_sims=20,
                                knockout="rw_choice_kernel", extra_sections=sections, extra_entries=entries)
    fmt = {"float_format": lambda v: f"{v:.2f}"}
    print(f"\n== Lab: {log['participant'].nunique()} invented participants, models fitted by maximum likelihood")
    print(tables["summed"].to_string(index=False, **fmt))
    print(tables["bms"].to_string(index=False, **fmt))
    print("knock-out of rw_choice_kernel's mechanisms (summed BIC change):")
    print(tables["knockout"][["mechanism", "delta_bic", "participants_worse"]].to_string(index=False, **fmt))
    print("parameter recovery (static_softmax):")
    print(summary[["parameter", "correlation", "bias"]].to_string(index=False, **fmt))
    print("model recovery (rows generating, columns winning):")
    print(confusion.to_string(**fmt))
    print(f"lab report in {folder.resolve()}")
    return folder
