"""Many simulated users of one agent on the batched simulator, for sweeps.

The stepping is :func:`shortcut_gym.agents.rollout.drive_batch` (a batch policy for all users,
one compiled call for the learning models' block sums, else one agent object per user fed what
``run_episode`` feeds it, so every path reproduces the single-env trial tables bit for bit). This
module cuts large batches into chunks (optionally on threads) and lays the results out as the
sweep's tables.

Results are either the full trial table (``record="trials"``) or per-user sums per session and
per command (``record="blocks"``), which stay small for 100,000 users.
"""

from __future__ import annotations

from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, PreparedAgent
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.agents.rollout import BatchRollout, UserSums, bind_for_world, context_of_world, drive_batch
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError, NotReadyError
from shortcut_gym.envs.seeds import check_seeds
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import World


@dataclass
class BlockSums:
    """One simulation's per-user sums (:class:`~shortcut_gym.agents.rollout.UserSums`) with the
    users' seeds and, for ``record="trials"``, the rollout's every trial and its simulator."""

    seeds: np.ndarray
    sums: UserSums
    rollout: BatchRollout | None = None
    sim: BatchSimulator | None = None

    @property
    def trials(self) -> np.ndarray:
        """(users, sessions) trial counts."""
        return self.sums.trials

    @property
    def time_s(self) -> np.ndarray:
        """(users, sessions) seconds."""
        return self.sums.time_s

    @property
    def outcomes(self) -> np.ndarray:
        """(users, sessions, outcomes) counts."""
        return self.sums.outcomes

    @property
    def actions(self) -> np.ndarray:
        """(users, sessions, actions) counts."""
        return self.sums.actions

    @property
    def command_time_s(self) -> np.ndarray:
        """(users, commands) seconds."""
        return self.sums.command_time_s

    @property
    def command_uses(self) -> np.ndarray:
        """(users, commands) uses."""
        return self.sums.command_uses


def build_agent(spec: dict[str, Any] | Agent, world: World, where: str = "simulate_users") -> Agent:
    """The agent to simulate on ``world``: a fresh agent of a spec dict, bound to the world's facts;
    or an :class:`Agent` object itself, in its current state (a table or model trained in memory,
    a plan already made), bound for the world by :func:`bind_for_world` (an object that cannot act
    there is refused, naming both worlds and ``where``). An object is never rebuilt from its spec,
    which cannot carry what it learned."""
    if isinstance(spec, Agent):
        bind_for_world(spec, world, where=where)
        return spec
    agent = agent_from_spec(spec)
    agent.bind(context_of_world(world))
    return agent


def prepare_agent(spec: dict[str, Any] | Agent, world: World) -> float:
    """Do the agent's once-per-world set-up (a planner's plan, kept for every later user of the
    world in this process) and return the seconds it took (0 for agents without one, or when the
    plan was made before). An agent object is prepared itself (:func:`build_agent`)."""
    agent = build_agent(spec, world, "prepare_agent")
    return float(agent.prepare()) if isinstance(agent, PreparedAgent) else 0.0


#: Users simulated together in one block sum; larger batches are cut into chunks of this size,
#: which keeps the per-trial working set in cache and the schedule arrays small (users are
#: independent, so chunking does not change any number).
CHUNK_USERS = 4096


def simulate_users(
    world: World,
    spec: dict[str, Any] | Agent,
    seeds: Sequence[int],
    record: str = "blocks",
    use_batch_policy: bool = True,
    chunk_users: int = CHUNK_USERS,
    fused: bool = True,
    threads: int = 1,
) -> BlockSums:
    """Simulate one user per seed with the agent of ``spec``; per-user sums (+ trial rows if asked).

    ``spec`` is a spec dict (a fresh agent per chunk of users) or an agent object, simulated as it
    is (:func:`build_agent`: a tabular agent's current table frozen, an SB3 model as trained or
    loaded), the same numbers as stepping the env one user at a time with that object.

    With ``record="blocks"``, a batch policy offering ``run(sim)`` (the learning models) runs the
    whole simulation in one compiled loop unless ``fused`` is False (same numbers either way).
    ``threads`` > 1 runs chunks of users on that many Python threads at once (block sums only; it
    pays where the work is compiled code that releases the GIL, as the fused loop and the
    simulator's reset do); users are independent, so the numbers do not change."""
    if record not in ("blocks", "trials"):
        raise ConfigError(f"record must be 'blocks' or 'trials', got {record!r}")
    if not (isinstance(threads, int) and threads >= 1):
        raise ConfigError(f"threads must be an integer >= 1, got {threads!r}")
    if isinstance(chunk_users, bool) or not isinstance(chunk_users, int) or chunk_users < 1:
        raise ConfigError(f"simulate_users: chunk_users must be a whole number >= 1, got {chunk_users!r}")
    seeds = np.asarray(check_seeds(seeds, "simulate_users"), dtype=np.int64)  # type: ignore[assignment]
    if len(seeds) == 0:
        raise ConfigError("need at least one seed")
    if isinstance(spec, Agent):  # bound (and prepared) once here, so chunks on threads only read it
        build_agent(spec, world)
        if isinstance(spec, PreparedAgent):
            spec.prepare()
    if record == "trials":
        return _simulate_chunk(world, spec, seeds, record, use_batch_policy, fused)  # type: ignore[arg-type]
    size = min(chunk_users, -(-len(seeds) // threads))
    if len(seeds) <= size:
        return _simulate_chunk(world, spec, seeds, record, use_batch_policy, fused)  # type: ignore[arg-type]
    chunks = [seeds[i:i + size] for i in range(0, len(seeds), size)]

    def run(part: np.ndarray) -> BlockSums:
        return _simulate_chunk(world, spec, part, record, use_batch_policy, fused)

    if threads > 1:
        with ThreadPoolExecutor(max_workers=threads) as pool:
            parts = list(pool.map(run, chunks))
    else:
        parts = [run(part) for part in chunks]  # type: ignore[arg-type]
    return BlockSums(seeds, UserSums.concatenate([p.sums for p in parts]))  # type: ignore[arg-type]


def _simulate_chunk(world: World, spec: dict[str, Any] | Agent, seeds: np.ndarray, record: str,
                    use_batch_policy: bool, fused: bool = True) -> BlockSums:
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds.tolist())
    agent = build_agent(spec, world)
    keep = record == "trials"
    rollout = drive_batch(sim, agent, seeds.tolist(), use_batch_policy, fused, keep_trials=keep)
    return BlockSums(seeds, rollout.sums, rollout if keep else None, sim if keep else None)


def trial_table(world: World, sums: BlockSums, label: str) -> pd.DataFrame:
    """The per-trial table of a ``record="trials"`` simulation, as ``run_episode`` lays it out, after
    ``agent``, ``user`` (the user's position in the seed list, 0-based, as in a sweep's users
    table) and ``seed`` (that user's seed)."""
    if sums.rollout is None or sums.rollout.trials is None or sums.sim is None:
        raise NotReadyError("this simulation kept no trial rows; rerun with record='trials'")
    sim, kept = sums.sim, sums.rollout.trials
    n, h = sim.n_users, sim.horizon
    acts, outc, ops = kept.action, kept.outcome, kept.operator_s  # (B, T), (B, T), (B, T, operators)
    names = np.array(world.commands.names, dtype=object)
    frame = {
        "agent": np.full(n * h, label, dtype=object),
        "user": np.repeat(np.arange(n), h),
        "seed": np.repeat(sums.seeds, h),
        "trial": np.tile(np.arange(h), n),
        "session": np.concatenate([s.session for s in sim.schedules]).astype(np.int64),
        "onset_s": sim.sched_onset.ravel(),
        "command": sim.sched_command.ravel(),
        "command_name": names[sim.sched_command.ravel()],
        "action": np.array(k.ACTION_NAMES, dtype=object)[acts.ravel()],
        "outcome": np.array(k.OUTCOME_NAMES, dtype=object)[outc.ravel()],
        "duration_s": kept.duration_s.ravel(),
        "p_recall": kept.p_recall.ravel(),
    }
    for j, op in enumerate(k.OPERATOR_NAMES):
        frame[f"t_{op}"] = ops[:, :, j].ravel()
    return pd.DataFrame(frame)
