"""Many simulated users of one learning model: the compiled batch policy.

User i of a policy made with seeds s draws the same action uniforms as a single agent reset with
seed s[i] (its generator ``agent_rng(s[i])``, one uniform per trial), so a batch reproduces the
single agent's choices user by user.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from shortcut_gym.agents.base import AGENT_STREAM, N_ACTIONS, AgentContext, agent_rng
from shortcut_gym.agents.batch_loop import check_fresh_run
from shortcut_gym.agents.learning import mechanisms as mech
from shortcut_gym.agents.learning.features import DT_FEATURE, decode_dt_s, dt_feature_index
from shortcut_gym.agents.learning.fused import AgentDraws, run_fused
from shortcut_gym.agents.learning.rules import BatchStep, RuleSet, batch_decide, batch_update, init_state, new_state
from shortcut_gym.agents.rollout import UserSums
from shortcut_gym.envs.errors import ConfigError, NotReadyError
from shortcut_gym.envs.simulator import BatchSimulator, seed_words


class BatchLearningPolicy:
    """Many users of one learning model: ``actions(targets, obs)`` then ``observe(...)`` per trial.

    Pass ``obs`` (B, D) from :class:`~shortcut_gym.envs.simulator.BatchSimulator`; the forgetting
    mechanism reads the time since last use from it. ``probabilities`` holds the last (B, 3).
    """

    _BLOCK = 64

    def __init__(self, name: str, context: AgentContext | None, rules: RuleSet, n_users: int,
                 seeds: Sequence[int]) -> None:
        if context is None:
            raise NotReadyError(f"{name}: bind a context before batch_policy")
        if len(seeds) != n_users:
            raise ConfigError(f"batch_policy: {len(seeds)} seeds for {n_users} users")
        self.name = name
        self.context = context
        self.n_users = n_users
        self.rules = rules
        self.horizon = context.horizon
        self.state = new_state(n_users, context.n_commands)
        init_state(rules, self.state)
        self.seeds = [int(s) for s in seeds]
        self._gens: list[np.random.Generator] | None = None
        self._u = np.zeros((n_users, self._BLOCK))
        self._u_pos = self._BLOCK
        self.probabilities = np.zeros((n_users, N_ACTIONS))
        self._step = BatchStep(targets=np.zeros(n_users, dtype=np.int64), dt_s=np.zeros(n_users),
                               uniforms=np.zeros(n_users), probs=self.probabilities,
                               actions=np.zeros(n_users, dtype=np.int64), beliefs_now=np.zeros(n_users))
        self.trial = 0
        self._dt_index: int | None = None

    @property
    def par(self) -> np.ndarray:
        """The full kernel parameter vector (slots ``mechanisms.P_*``)."""
        return self.rules.par

    @property
    def flags(self) -> np.ndarray:
        """The mechanism switches (slots ``mechanisms.M_*``)."""
        return self.rules.flags

    @property
    def gens(self) -> list[np.random.Generator]:
        """Each user's generator (``agent_rng(seed)``), made on first use."""
        if self._gens is None:
            self._gens = [agent_rng(s) for s in self.seeds]
        return self._gens

    def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
        """Sampled action (B,) of every user for its target command."""
        step = self._step
        step.targets[:] = np.asarray(targets, dtype=np.int64)
        if self.rules.flags[mech.M_FORGETTING] == 1:
            if self._dt_index is None:
                self._dt_index = dt_feature_index(self.context, obs.shape[1])
            step.dt_s[:] = decode_dt_s(obs[:, self._dt_index])
        if self._u_pos == self._BLOCK:
            self._u = np.stack([g.random(self._BLOCK) for g in self.gens])
            self._u_pos = 0
        step.uniforms[:] = self._u[:, self._u_pos]
        self._u_pos += 1
        batch_decide(step, self.trial, self.horizon, self.rules, self.state)
        return step.actions.copy()

    def observe(self, targets: np.ndarray, actions: np.ndarray, outcomes: np.ndarray, durations_s: np.ndarray) -> None:
        """Learn from the trial just run (outcome int codes, durations in seconds)."""
        batch_update(np.asarray(targets, dtype=np.int64), np.asarray(actions, dtype=np.int64),
                     np.asarray(outcomes, dtype=np.int64), np.asarray(durations_s, dtype=np.float64),
                     self._step.beliefs_now, self.rules, self.state)
        self.trial += 1

    def run(self, sim: BatchSimulator) -> UserSums:
        """Run a just-reset simulator to its horizon in one compiled loop (:mod:`.fused`); per-user
        sums equal to stepping ``actions`` / ``sim.step`` / ``observe`` trial by trial.

        The generators are not advanced by a fused run (the policy has reached the horizon; make a
        new policy for new users)."""
        check_fresh_run(sim, self.trial, self.n_users)
        if self.rules.flags[mech.M_FORGETTING] == 1:
            want = sim.world.observation_names().index(DT_FEATURE)
            got = dt_feature_index(self.context, sim.obs.shape[1])
            if got != want:
                raise ConfigError(f"the agent reads {DT_FEATURE!r} at observation index {got}, the simulator writes "
                                  f"it at {want}; bind the agent to this world's context")
        h = sim.horizon
        # each user's uniforms in generator order, as actions() draws them block by block; drawn
        # inside the compiled loop unless the generators are already in use
        words = seed_words(np.asarray(self.seeds), (AGENT_STREAM,)) if self._gens is None else None
        if words is None:
            draws = AgentDraws(np.stack([g.random(h) for g in self.gens]), np.zeros((self.n_users, 1), dtype=np.uint64),
                               np.zeros(self.n_users, dtype=np.int64))
        else:
            draws = AgentDraws(np.empty((0, h)), words[0], words[1].astype(np.int64))
        self._u_pos = self._BLOCK
        out = run_fused(sim, self.rules, self.horizon, self.state, draws)
        self.trial = h
        return out
