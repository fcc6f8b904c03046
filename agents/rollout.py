"""The one driver of agents: through a Gymnasium env (:func:`run_episode`) or through the batched
simulator (:func:`drive_batch`), with a neutral per-user sums type (:class:`UserSums`).

:func:`drive_batch` steps many users of a just-reset
:class:`~shortcut_gym.envs.simulator.BatchSimulator` one kernel call per trial. An agent offering a
batch policy (:class:`~shortcut_gym.agents.base.BatchAgent`) is driven as a whole batch; when only
sums are asked for and its policy runs a whole simulation itself
(:class:`~shortcut_gym.agents.base.FusedBatchPolicy`), that one call replaces the loop, with the
same numbers; with every trial kept, so does a policy whose one call keeps them
(:class:`~shortcut_gym.agents.base.RecordingBatchPolicy`). Any other agent is driven as one agent
object per user, given exactly the observations, info dicts and transitions :func:`run_episode`
gives it on ``CommandSelection-v0``.
"""

from __future__ import annotations

import copy
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, fields

import gymnasium as gym
import numpy as np
import pandas as pd

from shortcut_gym.agents.base import (
    N_ACTIONS,
    Agent,
    AgentContext,
    BatchAgent,
    BatchPolicy,
    FusedBatchPolicy,
    RecordingBatchPolicy,
    SessionBatchPolicy,
    Transition,
)
from shortcut_gym.agents.world_record import WorldRecorded, describe, differing_parts, parts_differ, world_record
from shortcut_gym.envs.errors import ConfigError, UsageError, WorldMismatchError
from shortcut_gym.envs.info import StepInfo, UpcomingInfo, simulator_step_info, simulator_upcoming_info
from shortcut_gym.envs.kernel import N_OPS, OUTCOME_NAMES
from shortcut_gym.envs.seeds import check_seeds
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import World, same_world
from shortcut_gym.envs.wrappers import TRIAL_COLUMNS, trial_row


def context_of_world(world: World, horizon: int | None = None) -> AgentContext:
    """World facts for binding an agent (``horizon``: trials per user, the world's by default)."""
    return AgentContext(world.commands.n_commands, world.horizon if horizon is None else int(horizon),
                        world.commands.names, tuple(world.observation_names()), world)


def context_of(env: gym.Env) -> AgentContext:
    """World facts of a (possibly wrapped) CommandSelection env for binding an agent."""
    return context_of_world(env.unwrapped.world)  # type: ignore[attr-defined]


def _words(world: World) -> str:
    return describe(world_record(world))


def check_own_world(agent: Agent, world: World, where: str) -> None:
    """Refuse an agent built for its own world (``Agent.own_world``) on a world posing another problem
    (:meth:`World.problem_digest`), naming both worlds and the parts that differ."""
    own = agent.own_world()
    if own is None or own is world or own.problem_digest() == world.problem_digest():
        return
    parts = differing_parts(world_record(own), world_record(world))
    raise WorldMismatchError(
        f"{where}: agent {agent.name!r} was built for the world {_words(own)} (its world= option) and runs on "
        f"the world {_words(world)} ({parts_differ(parts)}); build it without world= "
        "to act for the world it runs on, or run it on its own world")


def bind_for_world(agent: Agent, world: World, horizon: int | None = None, where: str = "run_episode") -> None:
    """Make ``agent`` act for ``world`` before a driver runs it there (``horizon``: trials per user
    when it is bound here, the world's by default).

    Unbound: bound to ``world``. Bound to another world (by content, :meth:`World.digest`; a context
    without a world counts as another): bound again when the agent rebinds (``Agent.rebinds``: its
    world-derived state is rebuilt), else refused with :class:`WorldMismatchError` naming both
    worlds. A context bound to this world is kept (its horizon too). An agent built for its own
    world (``Agent.own_world``, the planners' ``world=``) acts for that world whatever it is bound
    to, so it is refused on a world posing another problem (:meth:`World.problem_digest`). A trained
    model (:class:`WorldRecorded`) is then checked against ``world`` as its record says.
    """
    check_own_world(agent, world, where)
    context = agent.context
    if context is None or not same_world(context.world, world):
        if context is not None and not agent.rebinds:
            bound = "a context without a world" if context.world is None else f"the world {_words(context.world)}"
            raise WorldMismatchError(
                f"{where}: agent {agent.name!r} is bound to {bound} and runs on the world {_words(world)}; it "
                "cannot be bound again (its state is not rebuilt on bind): build a new agent for this world")
        agent.bind(context_of_world(world, horizon))
    if isinstance(agent, WorldRecorded):  # a trained model must meet its own world here too
        agent.check_world(world)


def run_episode(env: gym.Env, agent: Agent, seed: int | None = None, max_trials: int | None = None) -> pd.DataFrame:
    """One simulated user: reset env and agent with ``seed``, step until the episode ends
    (terminated at the schedule's end, or truncated by a wrapper such as ``TimeLimit``).

    The agent is bound to the env's world first, or bound again when it was bound to another
    (:func:`bind_for_world`). Returns one row per trial: trial, session, onset_s, command, command_name, action (name),
    outcome, duration_s, p_recall and the time breakdown ``t_<operator>`` columns.
    """
    bind_for_world(agent, env.unwrapped.world)  # type: ignore[attr-defined]
    obs, info = env.reset(seed=seed)
    agent.reset(seed)
    rows = []
    done = False
    while not done:
        action = agent.act(obs, info)
        next_obs, reward, terminated, truncated, step_info = env.step(action)
        agent.observe(Transition(obs, action, float(reward), next_obs, step_info, terminated, truncated))
        rows.append(trial_row(step_info))
        obs, info = next_obs, step_info
        done = terminated or truncated or (max_trials is not None and len(rows) >= max_trials)
    return pd.DataFrame(rows, columns=list(TRIAL_COLUMNS))


def evaluate_agent(env: gym.Env, agent: Agent, seeds: Iterable[int]) -> pd.DataFrame:
    """Total time (s) and hotkey share per simulated user, one row per seed."""
    seeds = check_seeds(seeds, "evaluate_agent")
    rows = []
    for s in seeds:
        df = run_episode(env, agent, seed=int(s))
        rows.append({"seed": int(s), "total_time_s": df["duration_s"].sum(),
                     "hotkey_share": float((df["outcome"] == "hotkey").mean())})
    return pd.DataFrame(rows)


def labelled_trial_table(env: gym.Env, agents: Iterable[tuple[str, Agent]], seeds: Sequence[int]) -> pd.DataFrame:
    """Trial table of every (label, agent) x seed: columns agent, user, then run_episode's. Labels
    must be unique (two agents under one label would be one agent in the table)."""
    agents = list(agents)
    labels = [label for label, _ in agents]
    repeated = sorted({label for label in labels if labels.count(label) > 1})
    if repeated:
        raise ConfigError(f"agent labels repeat: {repeated}; give each agent its own label")
    frames = []
    for label, agent in agents:
        for s in seeds:
            df = run_episode(env, agent, seed=int(s))
            df.insert(0, "user", int(s))
            df.insert(0, "agent", label)
            frames.append(df)
    return pd.concat(frames, ignore_index=True)


# ---- many users on the batched simulator ----------------------------------------------------------
@dataclass
class UserSums:
    """Per-user sums of a batched rollout (session index as in the schedules; times in seconds)."""

    trials: np.ndarray  # (users, sessions) int
    time_s: np.ndarray  # (users, sessions)
    outcomes: np.ndarray  # (users, sessions, outcomes) int, codes of OUTCOME_NAMES
    actions: np.ndarray  # (users, sessions, actions) int
    command_time_s: np.ndarray  # (users, commands)
    command_uses: np.ndarray  # (users, commands) int

    @classmethod
    def zeros(cls, n_users: int, n_sessions: int, n_commands: int) -> UserSums:
        """All-zero sums."""
        return cls(trials=np.zeros((n_users, n_sessions), dtype=np.int64), time_s=np.zeros((n_users, n_sessions)),
                   outcomes=np.zeros((n_users, n_sessions, len(OUTCOME_NAMES)), dtype=np.int64),
                   actions=np.zeros((n_users, n_sessions, N_ACTIONS), dtype=np.int64),
                   command_time_s=np.zeros((n_users, n_commands)),
                   command_uses=np.zeros((n_users, n_commands), dtype=np.int64))

    @classmethod
    def concatenate(cls, parts: Sequence[UserSums]) -> UserSums:
        """The users of several sums, in order."""
        return cls(**{f.name: np.concatenate([getattr(p, f.name) for p in parts]) for f in fields(cls)})


@dataclass
class TrialRecord:
    """Every trial of a batched rollout: (users, trials) arrays, ``operator_s`` (users, trials, operators)."""

    action: np.ndarray
    outcome: np.ndarray  # codes of OUTCOME_NAMES
    duration_s: np.ndarray
    p_recall: np.ndarray
    operator_s: np.ndarray


@dataclass
class BatchRollout:
    """What :func:`drive_batch` returns: the sums, and every trial when asked to keep them."""

    sums: UserSums
    trials: TrialRecord | None = None


class _PolicyStepper:
    """An agent's batch policy driving all users at once."""

    def __init__(self, policy: BatchPolicy) -> None:
        self.policy = policy

    def actions(self, sim: BatchSimulator) -> np.ndarray:
        self._targets = sim.targets().copy()
        if isinstance(self.policy, SessionBatchPolicy):
            self.policy.set_session(sim.sched_session[:, min(sim.trial, sim.horizon - 1)])
        return np.asarray(self.policy.actions(self._targets, sim.obs), dtype=np.int64)

    def observe(self, sim: BatchSimulator, t: int, acts: np.ndarray) -> None:
        self.policy.observe(self._targets, acts, sim.outcome, -sim.reward)


class _AgentStepper:
    """One agent object per user, fed the same obs, info and Transition as :func:`run_episode`.

    The users' agents are copies of one prototype reset once (so costly set-up such as a
    planner's solved plan is done once); each copy is then reset with its user's seed, as
    :func:`run_episode` resets one agent object for every seed.
    """

    def __init__(self, agent: Agent, sim: BatchSimulator, seeds: Sequence[int]) -> None:
        agent.reset(int(seeds[0]))
        self.agents = [copy.deepcopy(agent) for _ in seeds]
        for a, seed in zip(self.agents, seeds, strict=True):
            a.reset(int(seed))
        self.names = sim.world.commands.names
        self.obs = sim.obs.copy()
        self.infos: list[UpcomingInfo | StepInfo] = [simulator_upcoming_info(sim, b, self.names)
                                                     for b in range(sim.n_users)]

    def actions(self, sim: BatchSimulator) -> np.ndarray:
        return np.array([a.act(self.obs[b], self.infos[b]) for b, a in enumerate(self.agents)],  # type: ignore[arg-type]
                        dtype=np.int64)

    def observe(self, sim: BatchSimulator, t: int, acts: np.ndarray) -> None:
        next_obs = sim.obs.copy()
        terminated = t + 1 >= sim.horizon  # the schedule's end is a true end, as in the env
        for b, agent in enumerate(self.agents):
            info = simulator_step_info(sim, b, t, int(acts[b]), self.names)
            agent.observe(Transition(self.obs[b], int(acts[b]), float(sim.reward[b]), next_obs[b], info,  # type: ignore[arg-type]
                                     terminated, False))
            self.infos[b] = info
        self.obs = next_obs


def drive_batch(sim: BatchSimulator, agent: Agent, seeds: Sequence[int], use_batch_policy: bool = True,
                fused: bool = True, keep_trials: bool = False) -> BatchRollout:
    """Run every user of ``sim`` (just reset) to its horizon with ``agent`` (bound to the world; one
    bound to another world is bound again to the simulator's, with its horizon: :func:`bind_for_world`).

    User ``b``'s agent draws what the agent reset with ``seeds[b]`` draws. ``use_batch_policy``
    False drives one agent object per user even when a batch policy exists; ``fused`` False keeps
    the per-trial loop even when the policy could run the whole simulation in one call;
    ``keep_trials`` records every trial (:class:`TrialRecord`). The numbers are the same either way.
    """
    seeds = [int(s) for s in seeds]
    if sim.n_users == 0 or sim.trial != 0:
        raise UsageError("drive_batch needs a simulator just reset (trial 0)")
    if len(seeds) != sim.n_users:
        raise ConfigError(f"{len(seeds)} agent seeds for {sim.n_users} simulated users")
    if agent.context is not None:  # bound to another world: bound again to the simulator's (or refused)
        bind_for_world(agent, sim.world, sim.horizon, "drive_batch")
    else:
        check_own_world(agent, sim.world, "drive_batch")
        if isinstance(agent, WorldRecorded):
            agent.check_world(sim.world)
    stepper: _PolicyStepper | _AgentStepper
    if use_batch_policy and isinstance(agent, BatchAgent):
        policy = agent.batch_policy(sim.n_users, seeds)
        if fused and not keep_trials and isinstance(policy, FusedBatchPolicy):
            return BatchRollout(policy.run(sim))
        if fused and keep_trials and isinstance(policy, RecordingBatchPolicy):
            sums, kept = policy.run_recorded(sim)
            return BatchRollout(sums, kept)
        stepper = _PolicyStepper(policy)
    else:
        stepper = _AgentStepper(agent, sim, seeds)
    n, h = sim.n_users, sim.horizon
    sessions = sim.sched_session
    out = UserSums.zeros(n, int(sessions.max()) + 1, sim.world.commands.n_commands)
    shared = bool((sessions == sessions[0]).all())
    rows = np.arange(n)
    kept = TrialRecord(np.zeros((n, h), dtype=np.int64), np.zeros((n, h), dtype=np.int64), np.zeros((n, h)),
                       np.zeros((n, h)), np.zeros((n, h, N_OPS))) if keep_trials else None
    for t in range(h):
        acts = stepper.actions(sim)
        sim.step(acts)
        dur = -sim.reward
        cmd = sim.sched_command[:, t]
        s = int(sessions[0, t]) if shared else sessions[:, t]
        where = (slice(None), s) if shared else (rows, s)
        out.trials[where] += 1
        out.time_s[where] += dur
        out.outcomes[rows, s, sim.outcome] += 1
        out.actions[rows, s, acts] += 1
        out.command_time_s[rows, cmd] += dur
        out.command_uses[rows, cmd] += 1
        if kept is not None:
            kept.action[:, t] = acts
            kept.outcome[:, t] = sim.outcome
            kept.duration_s[:, t] = dur
            kept.p_recall[:, t] = sim.p_recall
            kept.operator_s[:, t] = sim.operator_time_s
        stepper.observe(sim, t, acts)
    return BatchRollout(out, kept)
