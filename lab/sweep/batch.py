"""Many simulated users of one agent on the batched simulator, one kernel call per trial.

An agent that offers ``batch_policy(n_users, seeds)`` (compiled, see CONTRACTS.md) is driven as a
whole batch; when only block sums are asked for and its policy offers ``run(sim)`` (the learning
models, :mod:`shortcut_gym.agents.learning.fused`), all trials of all users run in one compiled
call instead, with the same numbers. Any other agent is driven as one agent object per user (a Python loop over users
inside each trial), given exactly the observations and info dicts ``run_episode`` gives it on
``CommandSelection-v0``, so both paths reproduce the single-env trial tables bit for bit.

Results are either the full trial table (``record="trials"``) or per-user sums per session and
per command (``record="blocks"``), which stay small for 100,000 users.
"""

from __future__ import annotations

import copy
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext, Transition
from shortcut_gym.agents.learning import FusedSums
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import World

TRIAL_COLUMNS = ["trial", "session", "onset_s", "command", "command_name", "action", "outcome", "duration_s",
                 "p_recall"] + [f"t_{op}" for op in k.OPERATOR_NAMES]


@dataclass
class BlockSums(FusedSums):
    """Per-user sums (the fields of :class:`FusedSums`) with the users' seeds and, if recorded,
    the per-trial columns."""

    seeds: np.ndarray
    trial_rows: dict[str, list[np.ndarray]] = field(default_factory=dict)


def _context(world: World) -> AgentContext:
    """The context ``run_episode`` binds on a ``CommandSelection-v0`` env of this world."""
    return AgentContext(world.commands.n_commands, world.horizon, world.commands.names,
                        tuple(world.observation_names()), world)


def build_agent(spec: dict[str, Any] | Agent, world: World) -> Agent:
    """A fresh agent bound to the world's facts from a spec dict (or a copy of an agent's spec)."""
    agent = agent_from_spec(spec.spec() if isinstance(spec, Agent) else spec)
    agent.bind(_context(world))
    return agent


class _PerUserDriver:
    """One agent object per user, fed the same obs/info/Transition as ``run_episode``.

    The users' agents are copies of one prototype reset once (so costly set-up such as a
    planner's solved plan is done once); each copy is then reset with its user's seed, as
    ``run_episode`` resets one agent object for every seed.
    """

    def __init__(self, agent: Agent, world: World, seeds: Sequence[int]) -> None:
        self.world = world
        agent.reset(int(seeds[0]))
        self.agents = [copy.deepcopy(agent) for _ in seeds]
        for a, seed in zip(self.agents, seeds, strict=True):
            a.reset(int(seed))
        self.names = world.commands.names
        self.infos: list[dict[str, Any]] = []

    def start(self, sim: BatchSimulator) -> None:
        self.obs = sim.obs.copy()
        self.infos = [self._upcoming(sim, b) for b in range(sim.n_users)]

    def _upcoming(self, sim: BatchSimulator, b: int) -> dict[str, Any]:
        t = sim.trial
        tt = min(t, sim.horizon - 1)
        c = int(sim.sched_cmd[b, tt])
        return {"target": c, "target_name": self.names[c], "next_trial": t,
                "next_onset_s": float(sim.sched_onset[b, tt]), "next_session": int(sim.schedules[b].session[tt])}

    def actions(self, sim: BatchSimulator) -> np.ndarray:
        return np.array([a.act(self.obs[b], self.infos[b]) for b, a in enumerate(self.agents)], dtype=np.int64)

    def observe(self, sim: BatchSimulator, t: int, acts: np.ndarray) -> None:
        next_obs = sim.obs.copy()
        truncated = t + 1 >= sim.horizon
        ops = sim.ops.tolist()
        for b, agent in enumerate(self.agents):
            c = int(sim.sched_cmd[b, t])
            info = self._upcoming(sim, b)
            info.update(
                trial=t, session=int(sim.schedules[b].session[t]), onset_s=float(sim.sched_onset[b, t]),
                command=c, command_name=self.names[c], action=int(acts[b]),
                outcome=k.OUTCOME_NAMES[sim.outcome[b]], duration_s=-float(sim.reward[b]),
                p_recall=float(sim.p_recall[b]), time_s=dict(zip(k.OPERATOR_NAMES, ops[b], strict=True)),
            )
            agent.observe(Transition(self.obs[b], int(acts[b]), float(sim.reward[b]), next_obs[b], info,
                                     False, truncated))
            self.infos[b] = info
        self.obs = next_obs


class _BatchDriver:
    """An agent's compiled ``batch_policy`` driving all users at once."""

    def __init__(self, agent: Agent, seeds: Sequence[int]) -> None:
        self.policy = agent.batch_policy(len(seeds), [int(s) for s in seeds])  # type: ignore[attr-defined]

    def start(self, sim: BatchSimulator) -> None:
        return None

    def actions(self, sim: BatchSimulator) -> np.ndarray:
        self._targets = sim.targets().copy()
        return np.asarray(self.policy.actions(self._targets, sim.obs), dtype=np.int64)

    def observe(self, sim: BatchSimulator, t: int, acts: np.ndarray) -> None:
        self.policy.observe(self._targets, acts, sim.outcome, -sim.reward)


def has_batch_policy(spec: dict[str, Any] | Agent, world: World) -> bool:
    """Whether the agent of ``spec`` offers a compiled batched policy."""
    return callable(getattr(build_agent(spec, world), "batch_policy", None))


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

    With ``record="blocks"``, a batch policy offering ``run(sim)`` (the learning models) runs the
    whole simulation in one compiled loop unless ``fused`` is False (same numbers either way).
    ``threads`` > 1 runs chunks of users on that many Python threads at once (block sums only; it
    pays where the work is compiled code that releases the GIL, as the fused loop and the
    simulator's reset do); users are independent, so the numbers do not change."""
    if record not in ("blocks", "trials"):
        raise ValueError(f"record must be 'blocks' or 'trials', got {record!r}")
    if not (isinstance(threads, int) and threads >= 1):
        raise ValueError(f"threads must be an integer >= 1, got {threads!r}")
    seeds = np.asarray([int(s) for s in seeds], dtype=np.int64)
    if len(seeds) == 0:
        raise ValueError("need at least one seed")
    if record == "trials":
        return _simulate_chunk(world, spec, seeds, record, use_batch_policy, fused)
    size = min(chunk_users, -(-len(seeds) // threads))
    if len(seeds) <= size:
        return _simulate_chunk(world, spec, seeds, record, use_batch_policy, fused)
    chunks = [seeds[i:i + size] for i in range(0, len(seeds), size)]

    def run(part: np.ndarray) -> BlockSums:
        return _simulate_chunk(world, spec, part, record, use_batch_policy, fused)

    if threads > 1:
        with ThreadPoolExecutor(max_workers=threads) as pool:
            parts = list(pool.map(run, chunks))
    else:
        parts = [run(part) for part in chunks]
    return BlockSums(seeds=seeds, **{f: np.concatenate([getattr(p, f) for p in parts])
                                     for f in ("trials", "time_s", "outcomes", "actions", "command_time_s",
                                               "command_uses")})


def _simulate_chunk(world: World, spec: dict[str, Any] | Agent, seeds: np.ndarray, record: str,
                    use_batch_policy: bool, fused: bool = True) -> BlockSums:
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds.tolist())
    agent = build_agent(spec if not isinstance(spec, Agent) else spec.spec(), world)
    driver: _PerUserDriver | _BatchDriver
    if use_batch_policy and callable(getattr(agent, "batch_policy", None)):
        driver = _BatchDriver(agent, seeds.tolist())
    else:
        driver = _PerUserDriver(agent, world, seeds.tolist())
    runs_fused = isinstance(driver, _BatchDriver) and callable(getattr(driver.policy, "run", None))
    if fused and record == "blocks" and runs_fused:
        # one compiled loop over users and trials, same numbers as the per-trial loop below
        done = driver.policy.run(sim)  # type: ignore[union-attr]
        return BlockSums(seeds=seeds, **vars(done))
    driver.start(sim)
    n, h, c = sim.n_users, sim.horizon, world.commands.n_commands
    sessions = sim.sched_session
    n_sess = int(sessions.max()) + 1
    shared = bool((sessions == sessions[0]).all())
    rows = np.arange(n)
    out = BlockSums(
        seeds=seeds, trials=np.zeros((n, n_sess), dtype=np.int64), time_s=np.zeros((n, n_sess)),
        outcomes=np.zeros((n, n_sess, len(k.OUTCOME_NAMES)), dtype=np.int64),
        actions=np.zeros((n, n_sess, 3), dtype=np.int64), command_time_s=np.zeros((n, c)),
        command_uses=np.zeros((n, c), dtype=np.int64),
    )
    keep: dict[str, list[np.ndarray]] = {"action": [], "outcome": [], "duration_s": [], "p_recall": [], "ops": []}
    for t in range(h):
        acts = driver.actions(sim)
        sim.step(acts)
        dur = -sim.reward
        cmd = sim.sched_cmd[:, t]
        if shared:
            s = int(sessions[0, t])
            out.trials[:, s] += 1
            out.time_s[:, s] += dur
            out.outcomes[rows, s, sim.outcome] += 1
            out.actions[rows, s, acts] += 1
        else:
            s_b = sessions[:, t]
            out.trials[rows, s_b] += 1
            out.time_s[rows, s_b] += dur
            out.outcomes[rows, s_b, sim.outcome] += 1
            out.actions[rows, s_b, acts] += 1
        out.command_time_s[rows, cmd] += dur
        out.command_uses[rows, cmd] += 1
        if record == "trials":
            keep["action"].append(acts.copy())
            keep["outcome"].append(sim.outcome.copy())
            keep["duration_s"].append(dur.copy())
            keep["p_recall"].append(sim.p_recall.copy())
            keep["ops"].append(sim.ops.copy())
        driver.observe(sim, t, acts)
    if record == "trials":
        out.trial_rows = keep
        out.trial_rows["_sim"] = [sim]  # type: ignore[list-item]
    return out


def trial_table(world: World, sums: BlockSums, label: str) -> pd.DataFrame:
    """The per-trial table of a ``record="trials"`` simulation, as ``run_episode`` lays it out."""
    if not sums.trial_rows:
        raise ValueError("this simulation kept no trial rows; rerun with record='trials'")
    sim: BatchSimulator = sums.trial_rows["_sim"][0]  # type: ignore[assignment]
    keep = sums.trial_rows
    n, h = sim.n_users, sim.horizon
    acts = np.stack(keep["action"], axis=1)  # (B, T)
    outc = np.stack(keep["outcome"], axis=1)
    ops = np.stack(keep["ops"], axis=1)  # (B, T, 10)
    names = np.array(world.commands.names, dtype=object)
    frame = {
        "agent": np.full(n * h, label, dtype=object),
        "user": np.repeat(sums.seeds, h),
        "trial": np.tile(np.arange(h), n),
        "session": np.concatenate([s.session for s in sim.schedules]).astype(np.int64),
        "onset_s": sim.sched_onset.ravel(),
        "command": sim.sched_cmd.ravel(),
        "command_name": names[sim.sched_cmd.ravel()],
        "action": np.array(k.ACTION_NAMES, dtype=object)[acts.ravel()],
        "outcome": np.array(k.OUTCOME_NAMES, dtype=object)[outc.ravel()],
        "duration_s": np.stack(keep["duration_s"], axis=1).ravel(),
        "p_recall": np.stack(keep["p_recall"], axis=1).ravel(),
    }
    for j, op in enumerate(k.OPERATOR_NAMES):
        frame[f"t_{op}"] = ops[:, :, j].ravel()
    return pd.DataFrame(frame)
