"""Hotkey assignment: which commands get which of a few free key combinations.

Given a world (command set, costs, memory, schedule), a budget of ``B`` hotkeys and a pool of key
combinations with their keystroke counts (single keys, one- and two-modifier chords), choose the
assignment that maximises the expected time saved per simulated user over the horizon.

**Saving of a command under a combination.** From the yardstick planner: the planner's value of
the command's own MDP (no trace at the start, its expected uses left) with a hotkey of that many
keystrokes, minus its value with the menu only (every use by menu: uses x the menu path's
marginal time). The planner's optimum includes the menu-only policy, so every saving is >= 0.

**Why the problem separates.** The planner solves each command's MDP on its own (approximation 4
of :mod:`shortcut_gym.agents.planner`); the only coupling between commands is the hand position,
a mean field the planner shares through ``keyboard_share``. With that share fixed (default 0:
the hand rests on the mouse between trials, so a hotkey use pays the homing both ways), the value
of command c depends only on c's own key count, and the total saving of an assignment is the sum
of its commands' savings: a weighted bipartite matching of commands to combinations with at most
``B`` edges. :func:`assignment_world_savings` checks it (tests compare with the planner run on
the assigned world as a whole).

**Solvers.** :func:`solve_exact`: integer programme on scipy's ``milp`` (HiGHS); binary x[c, j],
each command at most one combination, each combination at most one command, at most B in all.
:func:`solve_brute_force`: enumeration of every partial injective map (the test oracle, small
sets only). :func:`solve_greedy`: the documented heuristic, greedy matching (take pairs by
falling saving while command and combination are free) followed by a local search until none
improves: move a command to a free combination, hand a combination to an unassigned command,
swap two commands' combinations, move one command and give its combination to a new one, add a
free pair. Greedy alone is within a factor 1/2 of the optimum
(the problem is the intersection of two matroids; Fisher, Nemhauser & Wolsey 1978, "An analysis of
approximations for maximizing submodular set functions II", Math. Programming Study 8; from
memory); the local search only improves on it. Its gap on small sets is measured by
``scripts/bench_assignment.py`` and bounded by the tests.

The optional :func:`population_savings` prices the same table by simulation under a population of
agents (for example learning models fitted to participants): per command, the mean time its trials
take under always-menu minus under the population, on the same users. There the separation is
only approximate (the hand position couples commands in the simulator).
"""

from __future__ import annotations

import itertools
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd
from scipy import sparse
from scipy.optimize import Bounds, LinearConstraint, milp

from shortcut_gym.agents.planner import (
    action_rewards,
    action_times,
    build_command_mdp,
    check_memory_kind,
    expected_uses,
    plan_world,
    solve_finite_horizon,
)
from shortcut_gym.agents.registry import agent_from_spec, refuse_planner_memory
from shortcut_gym.agents.rollout import labelled_trial_table
from shortcut_gym.agents.world_record import OVERRIDE, RETRAIN_ADVICE
from shortcut_gym.envs import CommandSelectionEnv, World
from shortcut_gym.envs.errors import ConfigError, DataError, WorldMismatchError
from shortcut_gym.envs.kernel import MENU
from shortcut_gym.envs.task import hotkey_keystrokes

#: Keys for generated pools, in the order they are handed out (home row first; common practice,
#: no source).
POOL_KEYS = tuple("JFKDLSAGHEIRUONTWYQPVBCMXZ") + tuple("/.,;'[]-=")


@dataclass(frozen=True)
class KeyCombo:
    """A free key combination: its label ("Ctrl+K", "/", "Ctrl+Shift+K") and keys pressed."""

    label: str
    keystrokes: int


def combos_from_labels(labels: Iterable[str]) -> list[KeyCombo]:
    """Combinations from hotkey labels (validated as scenario hotkeys; duplicates refused)."""
    out, seen = [], set()
    for label in labels:
        try:
            strokes = hotkey_keystrokes(label)
        except ValueError as err:
            raise ConfigError(f"key combination: {err}") from None
        if label in seen:
            raise ConfigError(f"key combination {label!r} is listed twice")
        seen.add(label)
        out.append(KeyCombo(label, strokes))
    if not out:
        raise ConfigError("the pool of key combinations is empty")
    return out


def combo_pool(single: int = 0, one_modifier: int = 0, two_modifier: int = 0) -> list[KeyCombo]:
    """A generated pool: ``single`` bare keys, ``one_modifier`` Ctrl+key, ``two_modifier`` Ctrl+Shift+key."""
    for name, v in (("single", single), ("one_modifier", one_modifier), ("two_modifier", two_modifier)):
        if int(v) != v or v < 0 or v > len(POOL_KEYS):
            raise ConfigError(f"{name} must be a whole number from 0 to {len(POOL_KEYS)}, got {v}")
    labels = [*POOL_KEYS[:single], *(f"Ctrl+{k}" for k in POOL_KEYS[:one_modifier]),
              *(f"Ctrl+Shift+{k}" for k in POOL_KEYS[:two_modifier])]
    return combos_from_labels(labels)


@dataclass(frozen=True)
class SavingTable:
    """Expected seconds saved per user over the horizon, per command and hotkey keystroke count.

    ``saving_s[c, i]``: command c with a hotkey of ``keystrokes[i]`` keys against the menu only;
    ``menu_only_s[c]``: its expected time per user with the menu only; ``uses[c]``: its uses.
    """

    names: tuple[str, ...]
    probability: np.ndarray
    uses: np.ndarray
    keystrokes: tuple[int, ...]
    saving_s: np.ndarray
    menu_only_s: np.ndarray
    source: str

    def for_combos(self, combos: Sequence[KeyCombo]) -> np.ndarray:
        """Saving matrix (commands x combinations) for a pool."""
        missing = sorted({c.keystrokes for c in combos} - set(self.keystrokes))
        if missing:
            raise DataError(f"the saving table has no column for {missing} keystrokes; it has {list(self.keystrokes)}")
        col = {k: i for i, k in enumerate(self.keystrokes)}
        return self.saving_s[:, [col[c.keystrokes] for c in combos]]

    def frame(self) -> pd.DataFrame:
        """Tidy table: command, probability, uses, menu_only_s, saving_s_<k>keys."""
        df = pd.DataFrame({"command": list(self.names), "probability": self.probability, "uses": self.uses,
                           "menu_only_s": self.menu_only_s})
        for i, k in enumerate(self.keystrokes):
            df[f"saving_s_{k}keys"] = self.saving_s[:, i]
        return df


def with_keystrokes(world: World, keystrokes: int | Sequence[int]) -> World:
    """A copy of ``world`` whose commands' hotkeys take these keystroke counts (one, or per command)."""
    n = world.commands.n_commands
    ks = np.broadcast_to(np.asarray(keystrokes, dtype=world.commands.keystrokes.dtype), (n,)).copy()
    if np.any(ks < 1):
        raise ConfigError(f"keystroke counts must be >= 1, got {sorted(set(ks.tolist()))}")
    return world.with_changes(commands=replace(world.commands, keystrokes=ks))


def _check_share(keyboard_share: float) -> float:
    if not 0.0 <= float(keyboard_share) <= 1.0:
        raise ConfigError(f"keyboard_share must be in [0, 1], got {keyboard_share}")
    return float(keyboard_share)


def planner_savings(world: World, keystrokes: Iterable[int] = (1, 2, 3), keyboard_share: float = 0.0,
                    n_bins: int = 40, n_weight_bins: int = 10) -> SavingTable:
    """The planner's saving of every command under a hotkey of each keystroke count (see module).

    Each command's MDP is built once (its transitions do not depend on the key count) and solved
    exactly (dense backward induction) for its expected uses with the rewards of every key count,
    at the fixed hand share. A command used once has a one-stage problem: the best reward of the
    no-trace state (the menu: a hotkey without a trace fails, learning costs the menu and more).
    """
    check_memory_kind(world, "planner_savings")
    ks = _check_share(keyboard_share)
    counts = tuple(sorted({int(k) for k in keystrokes}))
    if not counts or counts[0] < 1:
        raise ConfigError(f"keystroke counts must be >= 1, got {counts}")
    worlds = [with_keystrokes(world, k) for k in counts]
    n = world.commands.n_commands
    uses = np.array([expected_uses(world, c) for c in range(n)])
    saving = np.zeros((n, len(counts)))
    menu_only = np.zeros(n)
    for c in range(n):
        if uses[c] == 1:  # one use left: the DP's single stage reads state 0's rewards only
            for i, w in enumerate(worlds):
                R = action_rewards(action_times(w, c, ks, ks), np.array([-np.inf]), np.zeros(1))
                menu_only[c] = -R[0, MENU]
                saving[c, i] = R[0].max() - R[0, MENU]
            continue
        mdp = build_command_mdp(worlds[0], c, n_bins, ks, ks, n_weight_bins)
        for i, w in enumerate(worlds):
            R = mdp.R if i == 0 else action_rewards(action_times(w, c, ks, ks), mdp.activation, mdp.p_recall)
            V, _ = solve_finite_horizon(mdp.P, R, int(uses[c]))
            menu_only[c] = -uses[c] * R[0, MENU]
            saving[c, i] = V[uses[c], 0] + menu_only[c]
    # the DP adds the menu's rewards one stage at a time, uses x reward in one product: a plan that
    # never leaves the menu differs from menu-only by rounding only, which is no saving
    saving[saving <= 1e-9 * menu_only[:, None]] = 0.0
    return SavingTable(world.commands.names, world.commands.probability.copy(), uses, counts, saving, menu_only,
                       f"planner (keyboard_share={ks:g}, n_bins={n_bins})")


def population_savings(world: World, agents: Sequence[dict[str, Any]], keystrokes: Iterable[int] = (1, 2, 3),
                       seeds: Sequence[int] = range(20), where: str = "population_savings") -> SavingTable:
    """Savings by simulation under a population of agent specs (each agent meets every seed).

    Per command and key count: mean seconds per user its trials take under always-menu minus under
    the population, in the world where every command has a hotkey of that many keys (the same
    users, seeds ``seeds``). Approximate separation (see module); negative savings are kept.
    Those worlds differ from every trained model's own world by design, so a model agent needs
    ``allow_other_world=true``; without it the refusal (naming ``where``) says so, since retraining
    cannot help.
    """
    if not agents:
        raise ConfigError("population_savings needs at least one agent spec")
    refuse_planner_memory(world, [(str(s.get("label") or s.get("name")), str(s.get("name"))) for s in agents],
                          "population_savings")
    counts = tuple(sorted({int(k) for k in keystrokes}))
    n = world.commands.n_commands
    labelled = [(f"a{i}", agent_from_spec(s)) for i, s in enumerate(agents)]
    base = labelled_trial_table(CommandSelectionEnv(world=world), [("menu", agent_from_spec({"name": "always_menu"}))],
                                list(seeds))
    menu_only = base.groupby("command")["duration_s"].sum().reindex(range(n), fill_value=0.0).to_numpy() / len(seeds)
    saving = np.zeros((n, len(counts)))
    for i, k in enumerate(counts):
        try:
            trials = labelled_trial_table(CommandSelectionEnv(world=with_keystrokes(world, k)), labelled, list(seeds))
        except WorldMismatchError as err:
            if not str(err).endswith(f"; {RETRAIN_ADVICE}"):  # not a trained model's record: as it is
                raise
            finding = str(err).removesuffix(f"; {RETRAIN_ADVICE}")
            raise WorldMismatchError(f"{finding}; {where} tries other hotkey assignments: give "
                                     f"{OVERRIDE}=true") from None
        per = trials.groupby("command")["duration_s"].sum().reindex(range(n), fill_value=0.0).to_numpy()
        saving[:, i] = menu_only - per / (len(seeds) * len(labelled))
    uses = np.bincount(base["command"], minlength=n) / len(seeds)
    return SavingTable(world.commands.names, world.commands.probability.copy(), uses, counts, saving, menu_only,
                       f"simulated population of {len(agents)} agents x {len(seeds)} users")


@dataclass(frozen=True)
class Assignment:
    """Chosen pairs (command index, combination index) and their total saving (s per user)."""

    pairs: tuple[tuple[int, int], ...]
    saving_s: float
    method: str

    def frame(self, table: SavingTable, combos: Sequence[KeyCombo]) -> pd.DataFrame:
        """One row per assigned command: command, hotkey, keystrokes, probability, saving_s."""
        S = table.for_combos(combos)
        rows = [{"command": table.names[c], "hotkey": combos[j].label, "keystrokes": combos[j].keystrokes,
                 "probability": float(table.probability[c]), "saving_s": float(S[c, j])} for c, j in self.pairs]
        cols = ["command", "hotkey", "keystrokes", "probability", "saving_s"]
        return pd.DataFrame(rows, columns=cols).sort_values("saving_s", ascending=False, ignore_index=True)


def _check(saving: np.ndarray, budget: int) -> np.ndarray:
    S = np.asarray(saving, dtype=float)
    if S.ndim != 2 or S.size == 0:
        raise DataError(f"saving must be a non-empty (commands x combinations) matrix, got shape {S.shape}")
    if not np.all(np.isfinite(S)):
        raise DataError("saving matrix holds non-finite values")
    if int(budget) != budget or budget < 0:
        raise ConfigError(f"budget must be a whole number >= 0, got {budget}")
    return S


def _result(S: np.ndarray, pairs: Iterable[tuple[int, int]], method: str) -> Assignment:
    ordered = tuple(sorted((int(c), int(j)) for c, j in pairs))
    return Assignment(ordered, float(sum(S[c, j] for c, j in ordered)), method)


def solve_exact(saving: np.ndarray, budget: int) -> Assignment:
    """Optimal assignment by integer programming (scipy ``milp``); pairs saving <= 0 are never used."""
    S = _check(saving, budget)
    n, m = S.shape
    cand = np.argwhere(S > 0)
    if budget == 0 or len(cand) == 0:
        return _result(S, [], "exact")
    v = len(cand)
    cols = np.arange(v)
    A_cmd = sparse.csr_matrix((np.ones(v), (cand[:, 0], cols)), shape=(n, v))
    A_key = sparse.csr_matrix((np.ones(v), (cand[:, 1], cols)), shape=(m, v))
    A = sparse.vstack([A_cmd, A_key, sparse.csr_matrix(np.ones((1, v)))], format="csr")
    ub = np.concatenate([np.ones(n + m), [float(budget)]])
    res = milp(-S[cand[:, 0], cand[:, 1]], constraints=LinearConstraint(A, -np.inf, ub),
               integrality=np.ones(v), bounds=Bounds(0, 1))
    if not res.success:
        raise RuntimeError(f"milp failed on the assignment problem: {res.message}")  # invariant
    chosen = cand[np.round(res.x) > 0.5]
    return _result(S, chosen, "exact")


def solve_brute_force(saving: np.ndarray, budget: int) -> Assignment:
    """Optimal assignment by enumerating every partial injective map (small sets only)."""
    S = _check(saving, budget)
    n, m = S.shape
    if n > 10 or m > 10:
        raise ConfigError(f"brute force is for small sets (<= 10 commands and combinations), got {n} x {m}")
    best, best_pairs = 0.0, ()
    for b in range(1, min(budget, n, m) + 1):
        for cmds in itertools.combinations(range(n), b):
            for keys in itertools.permutations(range(m), b):
                total = float(S[list(cmds), list(keys)].sum())
                if total > best + 1e-12:
                    best, best_pairs = total, tuple(zip(cmds, keys, strict=True))  # type: ignore[assignment]
    return _result(S, best_pairs, "brute_force")


def solve_greedy(saving: np.ndarray, budget: int, local_search: bool = True) -> Assignment:
    """Greedy matching then local search (see module docstring); ties broken by lower indices."""
    S = _check(saving, budget)
    n, m = S.shape
    order = sorted(((-S[c, j], c, j) for c, j in np.argwhere(S > 0)))
    key_of: dict[int, int] = {}
    used: set[int] = set()
    for _, c, j in order:
        if len(key_of) >= budget:
            break
        if c not in key_of and j not in used:
            key_of[int(c)] = int(j)
            used.add(int(j))
    while local_search and _improve(S, key_of, budget):
        pass
    return _result(S, key_of.items(), "greedy" + ("+local" if local_search else ""))


def _improve(S: np.ndarray, key_of: dict[int, int], budget: int) -> bool:
    """One improving move, swap or replacement applied in place; False when none improves."""
    n, m = S.shape
    used = set(key_of.values())
    free_keys = [j for j in range(m) if j not in used]
    for c, j in list(key_of.items()):
        for j2 in free_keys:  # move c to a free combination
            if S[c, j2] > S[c, j] + 1e-12:
                key_of[c] = j2
                return True
        for c2 in range(n):  # hand c's combination to an unassigned command
            if c2 not in key_of and S[c2, j] > S[c, j] + 1e-12:
                del key_of[c]
                key_of[c2] = j
                return True
    for (c, j), (c2, j2) in itertools.combinations(list(key_of.items()), 2):  # swap two commands' keys
        if S[c, j2] + S[c2, j] > S[c, j] + S[c2, j2] + 1e-12:
            key_of[c], key_of[c2] = j2, j
            return True
    if len(key_of) < budget:  # c moves to a free combination and a free command takes c's
        for c, j in list(key_of.items()):
            for j2 in free_keys:
                for c2 in range(n):
                    if c2 not in key_of and S[c, j2] + S[c2, j] > S[c, j] + 1e-12:
                        key_of[c] = j2
                        key_of[c2] = j
                        return True
    if len(key_of) < budget:  # a free command on a free combination
        for j in free_keys:
            c = max((c for c in range(n) if c not in key_of), key=lambda c: S[c, j], default=None)  # type: ignore[assignment]
            if c is not None and S[c, j] > 1e-12:
                key_of[c] = j
                return True
    return False


def budget_curve(table: SavingTable, combos: Sequence[KeyCombo], budgets: Iterable[int]) -> pd.DataFrame:
    """Saving (s per user) against budget: exact, heuristic, their gap, and the chosen commands."""
    S = table.for_combos(combos)
    rows = []
    for b in budgets:
        exact, heur = solve_exact(S, b), solve_greedy(S, b)
        gap = (exact.saving_s - heur.saving_s) / exact.saving_s if exact.saving_s > 0 else 0.0
        rows.append({"budget": int(b), "exact_saving_s": exact.saving_s, "heuristic_saving_s": heur.saving_s,
                     "heuristic_gap": gap, "hotkeys_used": len(exact.pairs),
                     "commands": "; ".join(f"{table.names[c]}={combos[j].label}" for c, j in exact.pairs)})
    return pd.DataFrame(rows)


def assignment_world_savings(world: World, table: SavingTable, combos: Sequence[KeyCombo], assignment: Assignment,
                             keyboard_share: float = 0.0, n_bins: int = 40, n_weight_bins: int = 10,
                             no_hotkey_keystrokes: int = 10_000) -> float:
    """The assignment's saving recomputed by :func:`plan_world` on the assigned world as a whole.

    Assigned commands take their combination's keystrokes; the others a hotkey so dear
    (``no_hotkey_keystrokes`` keys) that no plan uses it, which stands for having none. Returns the
    menu-only total minus the total of the plan's per-command values (seconds per user), which the
    separation says equals ``assignment.saving_s``.
    """
    strokes = np.full(world.commands.n_commands, int(no_hotkey_keystrokes))
    for c, j in assignment.pairs:
        strokes[c] = combos[j].keystrokes
    mixed = with_keystrokes(world, strokes)  # type: ignore[arg-type]
    plan = plan_world(mixed, max_uses=int(table.uses.max()), n_bins=n_bins,
                      keyboard_share=_check_share(keyboard_share), n_weight_bins=n_weight_bins, select_users=0,
                      menu_expertise=False)
    total = sum(float(plan.values[c][table.uses[c], 0]) for c in range(world.commands.n_commands))
    return float(table.menu_only_s.sum()) + total


def synthetic_scenario(n_commands: int, items_per_menu: int = 10, zipf_exponent: float = 1.0,
                       name: str = "tidepool_logbook_large") -> dict[str, Any]:
    """A scenario dict of ``n_commands`` invented Tidepool Logbook commands in menus of
    ``items_per_menu`` items, Zipf usage in listed order, distinct placeholder hotkeys (the
    assignment replaces them)."""
    if n_commands < 1 or items_per_menu < 1:
        raise ConfigError(f"need n_commands >= 1 and items_per_menu >= 1, got {n_commands}, {items_per_menu}")
    chords = [f"{m}+{k}" for m in ("Ctrl", "Alt", "Ctrl+Shift", "Ctrl+Alt", "Alt+Shift", "Ctrl+Alt+Shift")
              for k in (*POOL_KEYS, *"0123456789", *(f"F{i}" for i in range(1, 13)))]
    if n_commands > len(chords):
        raise ConfigError(f"synthetic_scenario makes at most {len(chords)} commands, got {n_commands}")
    items = [{"name": f"Logbook action {i + 1:03d}", "hotkey": chords[i]} for i in range(n_commands)]
    menus = [{"title": f"Panel {m + 1}", "items": items[i:i + items_per_menu]}
             for m, i in enumerate(range(0, n_commands, items_per_menu))]
    return {"name": name, "description": "Generated Tidepool Logbook command set (invented).",
            "zipf_exponent": zipf_exponent, "menus": menus}
