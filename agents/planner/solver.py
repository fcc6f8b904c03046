"""Exact finite-horizon backward induction (Bellman 1957, *Dynamic Programming*; Puterman 1994,
*Markov Decision Processes*, ch. 4) and state occupancy under a policy, compiled over the
row-stacked CSR arrays of P (row a * S + s), which travel as one :class:`CsrRows` NamedTuple."""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np
from numba import njit
from scipy import sparse

from shortcut_gym.agents.planner.mdp import CommandMDP
from shortcut_gym.envs import kernel as k


class CsrRows(NamedTuple):
    """The actions' transition matrices stacked by rows (row a * S + s), in CSR form."""

    indptr: np.ndarray  # int64 (actions * S + 1,)
    indices: np.ndarray  # int64, column indices sorted within each row as scipy's product reads them
    data: np.ndarray  # float64


def csr_rows(matrices: Any) -> CsrRows:
    """:class:`CsrRows` of the actions' matrices (dense arrays or scipy sparse)."""
    stacked = sparse.vstack([sparse.csr_matrix(Pa) for Pa in matrices], format="csr")
    stacked.sort_indices()
    return CsrRows(stacked.indptr.astype(np.int64), stacked.indices.astype(np.int64), stacked.data.astype(np.float64))


def solve_finite_horizon(P: Any, R: np.ndarray, n_stages: int) -> tuple[np.ndarray, np.ndarray]:
    """Exact backward induction. Returns V (n_stages + 1, S), V[n] the optimal value with n
    stages left (V[0] = 0), and policy (n_stages + 1, S) (row 0 unused, -1); ties go to the
    lowest action index. ``P`` is dense (actions x S x S; the readable numpy loop, kept as the
    reference) or a list of scipy sparse matrices (a compiled loop over their CSR arrays that
    adds in the same order as scipy's product, so both give the same numbers bit for bit)."""
    if not isinstance(P, np.ndarray):
        return backward_induction_csr(csr_rows(P), np.ascontiguousarray(R, dtype=np.float64), int(n_stages))
    n_states = R.shape[0]
    V = np.zeros((n_stages + 1, n_states))
    policy = np.full((n_stages + 1, n_states), -1, dtype=np.int64)
    for n in range(1, n_stages + 1):
        future = P @ V[n - 1]
        Q = R.T + future  # (actions, S)
        policy[n] = np.argmax(Q, axis=0)
        V[n] = Q[policy[n], np.arange(n_states)]
    return V, policy


@njit(cache=True, inline="always")
def expected_next_value(P: CsrRows, row: int, prev: np.ndarray) -> float:
    """Sum over row ``row`` of the stacked P (a * S + s) of P[row, j] x prev[j], added in the
    order of scipy's sparse product."""
    acc = 0.0
    for jj in range(P.indptr[row], P.indptr[row + 1]):
        acc += P.data[jj] * prev[P.indices[jj]]
    return acc


@njit(cache=True, inline="always")
def bellman_backup(P: CsrRows, reward: np.ndarray, prev: np.ndarray, value: np.ndarray, action: np.ndarray) -> None:
    """One stage of backward induction: value[s] = max over a of reward[s, a] + the expected
    ``prev`` after (s, a), action[s] the maximising action (ties to the lowest index)."""
    n_states, n_actions = reward.shape
    for s in range(n_states):
        best = -np.inf
        best_a = -1
        for a in range(n_actions):
            q = reward[s, a] + expected_next_value(P, a * n_states + s, prev)
            if best_a < 0 or q > best:
                best, best_a = q, a
        action[s] = best_a
        value[s] = best


@njit(cache=True)
def backward_induction_csr(P: CsrRows, R: np.ndarray, n_stages: int) -> tuple[np.ndarray, np.ndarray]:
    """Backward induction over the row-stacked CSR arrays of P; R is (S x actions)."""
    n_states = R.shape[0]
    V = np.zeros((n_stages + 1, n_states))
    policy = np.full((n_stages + 1, n_states), -1, dtype=np.int64)
    for n in range(1, n_stages + 1):
        bellman_backup(P, R, V[n - 1], V[n], policy[n])
    return V, policy


@njit(cache=True)
def backward_induction_staged(P: CsrRows, R: np.ndarray, extra: np.ndarray, per_stage: np.ndarray,
                              n_stages: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`backward_induction_csr` with a stage-dependent reward R[s, a] + extra[s, a] x
    per_stage[n] at n stages left (the menu-expertise term, see :func:`.search.solve_at_shares`)."""
    n_states = R.shape[0]
    V = np.zeros((n_stages + 1, n_states))
    policy = np.full((n_stages + 1, n_states), -1, dtype=np.int64)
    stage_reward = np.empty_like(R)
    for n in range(1, n_stages + 1):
        np.multiply(extra, per_stage[n], stage_reward)
        np.add(R, stage_reward, stage_reward)  # R + extra x per_stage[n], as one sum in the same order
        bellman_backup(P, stage_reward, V[n - 1], V[n], policy[n])
    return V, policy


def stacked_csr(mdp: CommandMDP) -> CsrRows:
    """:func:`csr_rows` of the MDP's P, built once per MDP."""
    cached = getattr(mdp, "_csr", None)
    if cached is None:
        cached = mdp._csr = csr_rows(mdp.P)  # type: ignore[attr-defined]
    return cached


def state_occupancy(mdp: CommandMDP, actions: np.ndarray) -> np.ndarray:
    """(uses, S): the state distribution at each use from the no-trace state when use j takes
    ``actions[j]`` (an action per state), compiled over P's sparse rows."""
    return occupancy_csr(stacked_csr(mdp), np.ascontiguousarray(actions, dtype=np.int64))


@njit(cache=True)
def occupancy_csr(P: CsrRows, actions: np.ndarray) -> np.ndarray:
    """State distribution at each use from state 0, use j taking ``actions[j, s]`` in state s."""
    n_uses, n_states = actions.shape
    out = np.zeros((n_uses, n_states))
    if n_uses == 0:
        return out
    out[0, 0] = 1.0
    for j in range(n_uses - 1):
        for s in range(n_states):
            mass = out[j, s]
            if mass == 0.0:
                continue
            row = actions[j, s] * n_states + s
            for jj in range(P.indptr[row], P.indptr[row + 1]):
                out[j + 1, P.indices[jj]] += mass * P.data[jj]
    return out


def hotkey_shares(mdp: CommandMDP, actions: np.ndarray) -> tuple[float, float]:
    """(share of uses that attempt a hotkey, share that recall it) when use j of ``len(actions)``
    takes ``actions[j]`` (an action per state, shape (uses, S)), starting from the no-trace state."""
    occupancy = state_occupancy(mdp, actions)  # (uses, S)
    hot = occupancy * (actions == k.HOTKEY)
    n = max(len(actions), 1)
    return float(hot.sum()) / n, float((hot * mdp.p_recall).sum()) / n


@njit(cache=True)
def policy_evaluation_staged(P: CsrRows, R: np.ndarray, extra: np.ndarray, per_stage: np.ndarray,
                             policy: np.ndarray) -> np.ndarray:
    """V (n_stages + 1, S) of a fixed ``policy`` (n_stages + 1, S; row 0 unused) under the staged
    reward of :func:`backward_induction_staged` (the same sums, no maximisation; Puterman 1994, 4.2)."""
    n_states = R.shape[0]
    n_stages = policy.shape[0] - 1
    V = np.zeros((n_stages + 1, n_states))
    for n in range(1, n_stages + 1):
        prev = V[n - 1]
        w = per_stage[n]
        for s in range(n_states):
            a = policy[n, s]
            V[n, s] = R[s, a] + extra[s, a] * w + expected_next_value(P, a * n_states + s, prev)
    return V
