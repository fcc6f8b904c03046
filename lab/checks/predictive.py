"""Simulating agents on given or sampled schedules, and posterior-predictive checks.

:func:`simulate_log` produces a trial log (the lab's schema) from an agent; the environment and
the agent get independent seeds drawn from one generator, so the agent's choices are never
correlated with the environment's own draws. The users run through
:func:`shortcut_gym.agents.rollout.drive_batch` (a batch policy when the agent has one, else one
agent object per user).

The posterior-predictive check simulates each fitted model many times on each participant's own
schedule and compares the share of hotkey choices per block (data vs model mean, with a
percentile interval over simulated replicates of the group mean).
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext
from shortcut_gym.agents.rollout import bind_for_world, context_of_world, drive_batch
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError, DataError
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.task import Schedule
from shortcut_gym.envs.world import World
from shortcut_gym.lab.data.logs import participant_trials, participants, schedule_of

if TYPE_CHECKING:
    from matplotlib.figure import Figure
from shortcut_gym.lab.fitting import ModelSpec, fitted_agent


def _drive(world: World, make: Any, n: int, rng: np.random.Generator,
           schedule: Schedule | None) -> tuple[BatchSimulator, np.ndarray, np.ndarray, np.ndarray]:
    """Run ``n`` users; ``make(context)`` builds the agent. Returns the simulator, actions,
    outcome codes and durations (s), each (n, T)."""
    env_seeds = rng.integers(0, 2**62, size=n).tolist()
    agent_seeds = rng.integers(0, 2**62, size=n).tolist()
    sim = BatchSimulator(world)
    sim.reset(seeds=env_seeds, schedules=None if schedule is None else [schedule] * n)
    rollout = drive_batch(sim, make(context_of_world(world, sim.horizon)), agent_seeds, keep_trials=True)
    kept = rollout.trials
    if kept is None:
        raise RuntimeError("drive_batch kept no trials although asked to")  # invariant
    return sim, kept.action, kept.outcome, kept.duration_s


def simulate_log(world: World, make: Any, n_users: int, rng: np.random.Generator,
                 schedule: Schedule | None = None, prefix: str = "sim") -> pd.DataFrame:
    """A trial log (schema of :mod:`.logs`) of ``n_users`` simulated users named prefix-0, prefix-1, ...

    ``make`` is an :class:`Agent` (simulated as it is: a table or model trained in memory is used), a
    :class:`ModelSpec`, or a callable taking an :class:`AgentContext`. ``schedule`` replays one schedule for every user.
    """
    maker = _maker(make)
    sim, actions, outcomes, durations = _drive(world, maker, n_users, rng, schedule)
    h = sim.horizon
    cmd = sim.sched_command
    names = np.array(world.commands.names, dtype=object)
    return pd.DataFrame({
        "participant": np.repeat([f"{prefix}-{i}" for i in range(n_users)], h),
        "session": np.concatenate([s.session for s in sim.schedules]).astype(np.int64),
        "trial": np.tile(np.arange(h), n_users),
        "onset_s": sim.sched_onset.ravel(),
        "command": names[cmd.ravel()],
        "action": np.array(k.ACTION_NAMES, dtype=object)[actions.ravel()],
        "outcome": np.array(k.OUTCOME_NAMES, dtype=object)[outcomes.ravel()],
        "duration_s": durations.ravel(),
    })


def _maker(make: Any):
    if isinstance(make, ModelSpec):
        return lambda ctx: make.build(ctx)
    if isinstance(make, Agent):  # the object itself, in its current state (its spec cannot carry a trained table)
        def bound(ctx: AgentContext) -> Agent:
            bind_for_world(make, ctx.world, ctx.horizon, "simulate_log")
            return make

        return bound
    if callable(make):
        return make
    raise TypeError(f"cannot simulate {make!r}: give an Agent, a ModelSpec or a callable(context)")


# ---- posterior-predictive check -------------------------------------------------------------------
def block_of(trials: pd.DataFrame, block: str | int) -> np.ndarray:
    """Block index of each trial: its session (``block='session'``) or consecutive runs of N trials."""
    if block == "session":
        return trials["session"].to_numpy(dtype=np.int64)
    size = int(block)
    if size < 1:
        raise ConfigError(f"block size must be >= 1 trial, got {size}")
    return np.arange(len(trials)) // size


def hotkey_share_by_block(actions: np.ndarray, blocks: np.ndarray) -> np.ndarray:
    """Share of hotkey choices per block; ``actions`` (..., T) int codes -> (..., n_blocks)."""
    n_blocks = int(blocks.max()) + 1
    counts = np.bincount(blocks, minlength=n_blocks).astype(float)
    onehot = np.eye(n_blocks)[blocks]  # T x n_blocks
    return ((actions == k.HOTKEY).astype(float) @ onehot) / counts


def posterior_predictive(
    world: World,
    log: pd.DataFrame,
    fits: pd.DataFrame,
    specs: Sequence[ModelSpec],
    n_sims: int = 50,
    seed: int = 0,
    block: str | int = "session",
    interval: float = 0.9,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Data vs model hotkey share per block.

    Returns (per-participant table, group table). The group table has, per model and block
    (numbered from 0: with ``block='session'`` the log's session number), the data's mean over
    participants and the model's mean and ``interval`` percentile band over ``n_sims`` simulated
    replicates of that group mean (column ``replicates``).
    """
    by_label = {s.label: s for s in specs}
    rng = np.random.default_rng(seed)
    rows = []
    group_sims: dict[str, list[np.ndarray]] = {}
    data_shares = []
    for pid in participants(log):
        trials = participant_trials(log, pid)
        blocks = block_of(trials, block)
        data_actions = trials["action"].map({n: i for i, n in enumerate(k.ACTION_NAMES)}).to_numpy()
        data = hotkey_share_by_block(data_actions, blocks)
        data_shares.append(data)
        schedule = schedule_of(trials)
        for label, spec in by_label.items():
            row = fits[(fits["participant"] == pid) & (fits["model"] == label)]
            if row.empty:
                raise DataError(f"no fit of model {label!r} for participant {pid!r}")
            fit = row.iloc[0]
            _, actions, _, _ = _drive(world, lambda ctx, fit=fit, spec=spec: fitted_agent(spec, fit, ctx),
                                n_sims, rng, schedule)
            sims = hotkey_share_by_block(actions, blocks)  # n_sims x n_blocks
            group_sims.setdefault(label, []).append(sims)
            for b in range(len(data)):
                rows.append({"participant": pid, "model": label, "block": b, "data_hotkey_share": data[b],
                             "model_mean": sims[:, b].mean(), "model_sd": sims[:, b].std(ddof=1) if n_sims > 1 else 0})
    per = pd.DataFrame(rows)
    lo_q, hi_q = (1 - interval) / 2, 1 - (1 - interval) / 2
    n_blocks = min(len(d) for d in data_shares)
    data_mean = np.mean([d[:n_blocks] for d in data_shares], axis=0)
    grows = []
    for label, sims in group_sims.items():  # type: ignore[assignment]
        mean_over_people = np.mean([s[:, :n_blocks] for s in sims], axis=0)  # n_sims x blocks
        for b in range(n_blocks):
            grows.append({"model": label, "block": b, "data_mean": data_mean[b],
                          "model_mean": mean_over_people[:, b].mean(),
                          "model_lo": np.quantile(mean_over_people[:, b], lo_q),
                          "model_hi": np.quantile(mean_over_people[:, b], hi_q), "interval": interval,
                          "replicates": n_sims})
    return per, pd.DataFrame(grows)


#: Fewest simulated replicates for a 90% band to be read plainly: below 20 its 5% and 95% points
#: are little more than the lowest and highest replicate (the page says so). A project choice.
ROUGH_BAND_REPLICATES = 20
#: Most tick labels on the block axis (every block up to this many, else every k-th).
MAX_BLOCK_TICKS = 12


def band_words(interval: float, replicates: int | None) -> str:
    """Name of the model band: e.g. 'model 90% band', or with too few replicates
    'model 90% band (rough: 2 replicates)'."""
    words = f"model {interval:.0%} band"
    if replicates is not None and replicates < ROUGH_BAND_REPLICATES:
        words += f" (rough: {replicates} replicate{'s' if replicates != 1 else ''})"
    return words


def block_ticks(blocks: Sequence[int]) -> list[int]:
    """Integer tick positions for the block axis: every block, or every k-th when there are many."""
    values = sorted({int(b) for b in blocks})
    step = max(1, -(-len(values) // MAX_BLOCK_TICKS))
    return values[::step]


def predictive_figure(group: pd.DataFrame, title: str = "Hotkey use per block") -> Figure:
    """One panel per model: data mean (dots) vs model mean and interval band over the block
    numbers of ``group`` as they are (from 0, as in ``predictive_group.csv``), integer ticks."""
    from matplotlib.figure import Figure  # object API: the global backend is left alone

    models = list(dict.fromkeys(group["model"]))
    fig = Figure(figsize=(4 * len(models), 3.2))
    axes = fig.subplots(1, len(models), sharey=True, squeeze=False)
    for ax, label in zip(axes[0], models, strict=True):
        g = group[group["model"] == label]
        x = g["block"].to_numpy(dtype=np.int64)
        replicates = int(g["replicates"].iloc[0]) if "replicates" in g.columns else None
        ax.fill_between(x, g["model_lo"], g["model_hi"], alpha=0.3,
                        label=band_words(float(g["interval"].iloc[0]), replicates))
        ax.plot(x, g["model_mean"], "-", label="model mean")
        ax.plot(x, g["data_mean"], "ko", ms=4, label="data")
        ticks = block_ticks(x)
        ax.set_xticks(ticks, [str(t) for t in ticks])
        ax.set_title(label)
        ax.set_xlabel("block (from 0)")
        ax.set_ylim(0, 1)
    axes[0][0].set_ylabel("share of hotkey choices")
    axes[0][0].legend(fontsize=7, loc="best")
    fig.suptitle(title)
    fig.tight_layout()
    return fig


def plot_predictive(group: pd.DataFrame, path: str | Path, title: str = "Hotkey use per block") -> Path:
    """:func:`predictive_figure` saved as PNG at ``path``."""
    fig = predictive_figure(group, title)
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(p, dpi=110)
    return p
