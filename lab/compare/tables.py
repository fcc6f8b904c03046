"""Model-comparison tables: per participant x model criteria, summed criteria, log evidence.

Log evidence per participant is approximated by -BIC / 2 (Schwarz 1978), the usual choice when
no marginal likelihood is computed.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.compare.bms import BMSResult, random_effects_bms


def comparison_table(fits: pd.DataFrame) -> pd.DataFrame:
    """Per participant x model: ln L, k, n, AIC, BIC, delta BIC to the participant's best, rank."""
    need = ["participant", "model", "loglik", "n_params", "n_trials", "aic", "bic"]
    missing = [c for c in need if c not in fits.columns]
    if missing:
        raise ConfigError(f"fit table lacks column(s) {missing}")
    t = fits[need].copy()
    t["delta_bic"] = t["bic"] - t.groupby("participant")["bic"].transform("min")
    t["delta_aic"] = t["aic"] - t.groupby("participant")["aic"].transform("min")
    t["bic_rank"] = t.groupby("participant")["bic"].rank(method="min").astype(int)
    return t.sort_values(["participant", "bic"]).reset_index(drop=True)


def summed_criteria(fits: pd.DataFrame) -> pd.DataFrame:
    """Per model: summed ln L, AIC, BIC over participants, and participants it wins by BIC."""
    t = comparison_table(fits)
    out = t.groupby("model").agg(participants=("participant", "nunique"), loglik=("loglik", "sum"),
                                 n_params=("n_params", "sum"), aic=("aic", "sum"), bic=("bic", "sum"),
                                 wins_bic=("bic_rank", lambda r: int((r == 1).sum())))
    out["delta_bic"] = out["bic"] - out["bic"].min()
    return out.sort_values("bic").reset_index()


def log_evidence_matrix(fits: pd.DataFrame) -> tuple[np.ndarray, list[str], list[str]]:
    """(participants x models) matrix of -BIC/2, participant ids, model labels; errors on gaps."""
    wide = fits.pivot(index="participant", columns="model", values="bic")
    if wide.isna().any().any():
        p, m = np.argwhere(wide.isna().to_numpy())[0]
        raise ConfigError(f"no BIC for participant {wide.index[p]!r}, model {wide.columns[m]!r}")
    values = -0.5 * wide.to_numpy(dtype=float)
    if not np.isfinite(values).all():
        p, m = np.argwhere(~np.isfinite(values))[0]
        raise ConfigError(f"BIC of participant {wide.index[p]!r}, model {wide.columns[m]!r} is not finite")
    return values, [str(i) for i in wide.index], [str(c) for c in wide.columns]


def bms_of_fits(fits: pd.DataFrame, alpha0: float = 1.0) -> BMSResult:
    """Random-effects BMS with -BIC/2 as each participant's log evidence."""
    lme, _, models = log_evidence_matrix(fits)
    return random_effects_bms(lme, models, alpha0)
