"""Tutorial step 4: fit models to a trial log and read the comparison.

The log here is synthetic (simulated users of two known models on the demo scenario), so we know
which model generated whom; with a real log, read it with ``read_log(path, world.commands)``.
Run: .venv/bin/python examples/tutorial_04_fit_and_compare.py
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from shortcut_gym.envs import make_world
from shortcut_gym.lab.checks.recovery import simulate_known
from shortcut_gym.lab.compare import bms_of_fits, summed_criteria
from shortcut_gym.lab.data.logs import read_log, write_log
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_log


def main(per_model: int = 3, n_starts: int = 3) -> dict[str, pd.DataFrame]:
    world = make_world(schedule={"sessions": 4, "trials_per_session": 40})
    models = [ModelSpec("static_softmax"), ModelSpec("rescorla_wagner")]

    # 1. A log of invented participants: per_model simulated users of each model.
    rng = np.random.default_rng(0)
    parts = [simulate_known(world, m, per_model, rng, prefix=f"p{j}")[0] for j, m in enumerate(models)]
    log = pd.concat(parts, ignore_index=True)
    with tempfile.TemporaryDirectory() as tmp:
        path = write_log(log, Path(tmp) / "tidepool_log.csv")  # the trial-log schema, as CSV
        log = read_log(path, world.commands)  # validated: a fault names file, row and column
    print(f"log: {log['participant'].nunique()} participants, {len(log)} trials")

    # 2. Maximum-likelihood fits per participant x model (multi-start, seeded).
    fits = fit_log(log, models, context_for(log, world.commands.names, world), n_starts=n_starts, seed=0, n_jobs=1)
    print(fits[["participant", "model", "loglik", "bic"]].to_string(index=False, float_format=lambda v: f"{v:.1f}"))

    # 3. Summed criteria and random-effects Bayesian model selection.
    summed = summed_criteria(fits)
    print(summed.to_string(index=False, float_format=lambda v: f"{v:.1f}"))
    bms = bms_of_fits(fits).table()
    print(bms.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    return {"fits": fits, "summed": summed, "bms": bms}


if __name__ == "__main__":
    main()
