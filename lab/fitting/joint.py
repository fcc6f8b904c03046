"""Joint likelihood of a participant's choices and trial durations, for any choice model.

Given the logged actions and outcomes, the durations depend only on the operator times (the
duration fit of :mod:`.durations`), and the choices only on the choice model; so the joint
log-likelihood is the sum ln L_choice + ln L_duration, with k_choice + k_duration parameters.
For a choice model that reads the durations' world (``planned_choice`` in the participant's
implied world) this is the two-stage (plug-in) joint fit, not a simultaneous one.
BIC of the joint: k ln n - 2 ln L with n the participant's trials (Schwarz 1978).
"""

from __future__ import annotations

import pandas as pd

from shortcut_gym.envs.errors import DataError
from shortcut_gym.lab.fitting.criteria import aic, bic


def joint_table(choice_fits: pd.DataFrame, duration_fits: pd.DataFrame) -> pd.DataFrame:
    """``choice_fits`` (``fit_log`` rows) with the duration fit of each participant added:
    ``duration_loglik``, ``joint_loglik``, ``joint_n_params``, ``joint_aic``, ``joint_bic``.

    Every participant of the choice fits needs a duration fit (a missing one is an error naming it).
    """
    need = {"participant", "loglik", "n_params"}
    for name, table in (("choice_fits", choice_fits), ("duration_fits", duration_fits)):
        missing = need - set(table.columns)
        if missing:
            raise DataError(f"{name} lacks column(s) {sorted(missing)}")
    durations = duration_fits.set_index(duration_fits["participant"].astype(str))
    pids = choice_fits["participant"].astype(str)
    absent = sorted(set(pids) - set(durations.index))
    if absent:
        raise DataError(f"no duration fit for participant(s) {absent}")
    out = choice_fits.copy()
    out["duration_loglik"] = pids.map(durations["loglik"]).to_numpy()
    out["joint_loglik"] = out["loglik"] + out["duration_loglik"]
    out["joint_n_params"] = out["n_params"] + pids.map(durations["n_params"]).to_numpy()
    out["joint_aic"] = [aic(ll, int(k)) for ll, k in zip(out["joint_loglik"], out["joint_n_params"], strict=True)]
    out["joint_bic"] = [bic(ll, int(k), int(n)) for ll, k, n in
                        zip(out["joint_loglik"], out["joint_n_params"], out["n_trials"], strict=True)]
    return out
