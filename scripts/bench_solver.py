"""The planner's backward-induction solver against a straightforward numpy reference, same MDP, same run.

The solver timed is the one every plan goes through (:func:`shortcut_gym.agents.planner.solver.
backward_induction_staged`: the compiled one-Bellman-backup loop over P's sparse rows, with the
menu-expertise reward by stage). The reference is written here from the finite-horizon Bellman
equation (Bellman 1957; Puterman 1994, *Markov Decision Processes*, eq. 4.5.1):

    V_0 = 0,   V_n(s) = max_a [ R(s, a) + extra(s, a) w_n + sum_s' P_a(s, s') V_{n-1}(s') ],

with dense numpy matrices (actions x S x S), and, as a second reference, the same loop with scipy's
sparse product. The MDP is the demo world's most used command, built by the planner's own
:func:`~shortcut_gym.agents.planner.mdp.build_command_mdp` at a few grid sizes; stages are its
expected uses over a horizon of ``--horizon`` trials. Each pair of timings is interleaved (solver,
dense, sparse, solver, ...) and the ratios are medians of the paired ratios, with their min and max.
Values are compared in the same run: max |V_solver - V_reference| over every stage and state, and
the states whose chosen action differs where the reference's best two actions are more than 1e-9
apart (ties may go either way). Nothing is asserted; the figures are printed.
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable

import numpy as np
from benchmarks.timing import load_average
from scipy import sparse

from shortcut_gym.agents.planner.mdp import CommandMDP, build_command_mdp
from shortcut_gym.agents.planner.search import expected_uses, novice_terms
from shortcut_gym.agents.planner.solver import backward_induction_staged, stacked_csr
from shortcut_gym.envs import make_world
from shortcut_gym.envs.world import World

#: (activation bins, trace-weight bins) of the MDPs timed: S = 1 + bins x weight bins states.
SIZES = ((20, 5), (40, 10), (80, 10))


def reference_dense(P: np.ndarray, R: np.ndarray, extra: np.ndarray, per_stage: np.ndarray,
                    n_stages: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """V (n + 1, S), the maximising action (n + 1, S; row 0 -1) and the gap between the best two
    action values (n + 1, S) by the Bellman equation with dense P (actions x S x S)."""
    n_actions, n_states, _ = P.shape
    V = np.zeros((n_stages + 1, n_states))
    best = np.full((n_stages + 1, n_states), -1)
    gap = np.full((n_stages + 1, n_states), np.inf)
    for n in range(1, n_stages + 1):
        Q = np.empty((n_states, n_actions))
        for a in range(n_actions):
            Q[:, a] = R[:, a] + extra[:, a] * per_stage[n] + P[a] @ V[n - 1]
        best[n] = Q.argmax(axis=1)
        V[n] = Q.max(axis=1)
        ordered = np.sort(Q, axis=1)
        gap[n] = ordered[:, -1] - ordered[:, -2]
    return V, best, gap


def reference_sparse(P: list, R: np.ndarray, extra: np.ndarray, per_stage: np.ndarray,
                     n_stages: int) -> np.ndarray:
    """V (n + 1, S) by the same equation with scipy CSR matrices per action."""
    n_states, n_actions = R.shape
    V = np.zeros((n_stages + 1, n_states))
    for n in range(1, n_stages + 1):
        Q = np.stack([R[:, a] + extra[:, a] * per_stage[n] + P[a] @ V[n - 1] for a in range(n_actions)], axis=1)
        V[n] = Q.max(axis=1)
    return V


def timed(fn: Callable[[], object]) -> tuple[float, object]:
    """(seconds, result) of one call."""
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def bench_size(world: World, command: int, n_bins: int, n_weight_bins: int, repeats: int) -> None:
    """Time and compare the solver and the references on one MDP, printing one row."""
    mdp: CommandMDP = build_command_mdp(world, command, n_bins=n_bins, n_weight_bins=n_weight_bins)
    n = expected_uses(world, command)
    extra, per_stage = novice_terms(world, command, mdp, n)
    R = np.ascontiguousarray(mdp.R, dtype=np.float64)
    csr = stacked_csr(mdp)
    P_sparse = [sparse.csr_matrix(Pa) for Pa in mdp.P]
    solver = lambda: backward_induction_staged(csr, R, extra, per_stage, n)  # noqa: E731
    dense = lambda: reference_dense(mdp.P, R, extra, per_stage, n)  # noqa: E731
    scipy_ref = lambda: reference_sparse(P_sparse, R, extra, per_stage, n)  # noqa: E731
    solver()  # warm-up (numba compiles or loads its cache)
    t_solver, t_dense, t_sparse = [], [], []
    for _ in range(repeats):
        s, (V, policy) = timed(solver)
        d, (V_ref, best_ref, gap) = timed(dense)
        p, V_sp = timed(scipy_ref)
        t_solver.append(s)
        t_dense.append(d)
        t_sparse.append(p)
    dense_ratios = [d / s for s, d in zip(t_solver, t_dense, strict=True)]
    sparse_ratios = [p / s for s, p in zip(t_solver, t_sparse, strict=True)]
    diff = float(np.max(np.abs(V - V_ref)))
    diff_sparse = float(np.max(np.abs(V - V_sp)))
    clear = gap[1:] > 1e-9
    mismatched = int(np.sum((policy[1:] != best_ref[1:]) & clear))
    nnz = csr.indptr[-1]
    print(f"{mdp.n_states:>6} {n:>6} {nnz / (3 * mdp.n_states):>8.1f} {statistics.median(t_solver) * 1e3:>10.2f} "
          f"{statistics.median(dense_ratios):>8.1f} ({min(dense_ratios):.1f}-{max(dense_ratios):.1f}) "
          f"{statistics.median(sparse_ratios):>8.1f} ({min(sparse_ratios):.1f}-{max(sparse_ratios):.1f}) "
          f"{diff:>10.2e} {diff_sparse:>10.2e} {mismatched:>5}/{int(clear.sum())}")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--horizon", type=int, default=2000, help="trials per simulated user (default 2000)")
    parser.add_argument("--repeats", type=int, default=7, help="interleaved timing repeats per size (default 7)")
    args = parser.parse_args(argv)
    if args.horizon < 1 or args.repeats < 1:
        parser.error(f"--horizon and --repeats must be >= 1, got {args.horizon} and {args.repeats}")
    sessions = max(args.horizon // 100, 1)
    world = make_world(schedule={"sessions": sessions, "trials_per_session": args.horizon // sessions})
    command = int(np.argmax(world.commands.probability))
    print(f"load average (1, 5, 15 min) before: {load_average()}")
    print(f"command {world.commands.names[command]!r}, {args.repeats} interleaved repeats; ratio = reference "
          "seconds / solver seconds (median of paired ratios, min-max); |dV| = max abs value difference")
    print(f"{'states':>6} {'stages':>6} {'nnz/row':>8} {'solver ms':>10} {'dense x':>8} {'(range)':<9} "
          f"{'scipy x':>8} {'(range)':<9} {'|dV| dense':>10} {'|dV| scipy':>10} {'policy differs':>14}")
    for n_bins, n_weight_bins in SIZES:
        bench_size(world, command, n_bins, n_weight_bins, args.repeats)
    print(f"load average (1, 5, 15 min) after: {load_average()}")


if __name__ == "__main__":
    main()
