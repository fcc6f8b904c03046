"""Hotkey assignment: exact solver against brute force, the heuristic's bound, the separation
into per-command savings, and the trade's sanity check with a budget of one."""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents.planner import action_times, expected_uses, plan_world
from shortcut_gym.envs import make_world
from shortcut_gym.lab.design.assignment import (
    KeyCombo,
    assignment_world_savings,
    budget_curve,
    combo_pool,
    combos_from_labels,
    planner_savings,
    population_savings,
    solve_brute_force,
    solve_exact,
    solve_greedy,
    synthetic_scenario,
    with_keystrokes,
)

SHORT = {"sessions": 6, "trials_per_session": 30}


def _small_world(rng: np.random.Generator, n: int):
    sc = synthetic_scenario(n, items_per_menu=int(rng.integers(1, 5)))
    weights = rng.dirichlet(np.ones(n) * 0.7) + 1e-3
    for menu in sc["menus"]:
        for item in menu["items"]:
            item["weight"] = float(weights[int(item["name"][-3:]) - 1])
    typist = str(rng.choice(["good_typist", "average_skilled_typist", "average_non_secretary"]))
    return make_world(sc, costs={"klm": {"typist": typist}}, schedule=SHORT)


def _family():
    """Small command sets (2-8 commands) priced by the planner, with pools of 2-6 combinations."""
    rng = np.random.default_rng(17)
    out = []
    for i in range(14):
        world = _small_world(rng, 2 + i % 7)
        table = planner_savings(world, n_bins=12, n_weight_bins=4, keyboard_share=float(rng.choice([0.0, 0.5])))
        pool = combo_pool(int(rng.integers(1, 3)), int(rng.integers(0, 3)), int(rng.integers(1, 3)))
        out.append((table, pool))
    return out


FAMILY = _family()


@pytest.mark.parametrize("index", range(len(FAMILY)))
@pytest.mark.parametrize("budget", [1, 2, 3, 4])
def test_exact_equals_brute_force_on_planner_priced_sets(index: int, budget: int) -> None:
    table, pool = FAMILY[index]
    S = table.for_combos(pool)
    exact, brute = solve_exact(S, budget), solve_brute_force(S, budget)
    assert exact.saving_s == pytest.approx(brute.saving_s, rel=1e-9, abs=1e-9)
    assert len(exact.pairs) <= budget
    assert len({c for c, _ in exact.pairs}) == len(exact.pairs) == len({j for _, j in exact.pairs})
    heuristic, greedy = solve_greedy(S, budget), solve_greedy(S, budget, local_search=False)
    assert greedy.saving_s <= heuristic.saving_s + 1e-9 <= exact.saving_s + 2e-9
    assert greedy.saving_s >= 0.5 * exact.saving_s - 1e-9  # greedy on two matroids: within 1/2


def test_exact_equals_brute_force_on_random_matrices_with_ties_and_zeros() -> None:
    """Sets the planner rarely makes: arbitrary savings, many ties and zero rows."""
    rng = np.random.default_rng(3)
    for _ in range(150):
        n, m, budget = int(rng.integers(1, 9)), int(rng.integers(1, 7)), int(rng.integers(0, 5))
        S = rng.integers(0, 4, size=(n, m)).astype(float) * rng.choice([1.0, 0.5])
        exact, brute = solve_exact(S, budget), solve_brute_force(S, budget)
        assert exact.saving_s == pytest.approx(brute.saving_s, abs=1e-9), (S, budget)
        assert solve_greedy(S, budget).saving_s <= exact.saving_s + 1e-9


def test_greedy_alone_can_be_beaten_and_local_search_recovers() -> None:
    """The classic trap: greedy takes the single best pair and blocks two good ones."""
    S = np.array([[10.0, 9.0], [9.0, 0.0]])
    assert solve_greedy(S, 2, local_search=False).saving_s == 10.0
    assert solve_exact(S, 2).saving_s == 18.0
    assert solve_greedy(S, 2).saving_s == 18.0


def test_saving_separates_into_per_command_terms_on_the_whole_world() -> None:
    """The assignment's sum of savings equals the planner run on the assigned world as a whole."""
    world = make_world()
    pool = combo_pool(single=1, one_modifier=2, two_modifier=2)
    for share in (0.0, 0.5):
        table = planner_savings(world, keyboard_share=share, n_bins=20)
        for budget in (1, 3, 5):
            chosen = solve_exact(table.for_combos(pool), budget)
            whole = assignment_world_savings(world, table, pool, chosen, keyboard_share=share, n_bins=20)
            assert whole == pytest.approx(chosen.saving_s, rel=1e-9)
            assert chosen.saving_s > 0


@pytest.mark.parametrize("share", [0.0, 0.5])
def test_savings_are_the_planner_values_of_each_command_world(share: float) -> None:
    """Table entries equal plan_world's value (menu-only minus with hotkey) for every command,
    the one-use shortcut included; fewer keys never save less; menu-only is uses x menu time."""
    world = make_world(synthetic_scenario(24, items_per_menu=6), schedule={"sessions": 3, "trials_per_session": 30})
    table = planner_savings(world, (1, 2, 3), keyboard_share=share, n_bins=16)
    assert np.all(np.diff(table.saving_s, axis=1) <= 1e-9)
    assert np.all(table.saving_s >= 0) and table.saving_s[0, 0] > 0
    assert (table.uses == 1).any() and (table.uses > 1).any()
    for i, k in enumerate((1, 2, 3)):
        plan = plan_world(with_keystrokes(world, k), keyboard_share=share, n_bins=16, max_uses=int(table.uses.max()),
                          select_users=0, menu_expertise=False)  # the values the table separates
        for c in range(world.commands.n_commands):
            n_c = expected_uses(world, c)
            t = action_times(world, c, share)
            menu_only = n_c * (t.menu_s + t.return_after_mouse_s)
            assert table.menu_only_s[c] == pytest.approx(menu_only, rel=1e-12)
            assert table.saving_s[c, i] == pytest.approx(menu_only + plan.values[c][n_c, 0], rel=1e-9, abs=1e-9)


def _frequency_only_world(typist: str, encoding_s: float, sessions: int, n: int = 6):
    """Each command alone in its own menu: commands differ only in usage frequency."""
    sc = synthetic_scenario(n, items_per_menu=1)
    return make_world(sc, costs={"klm": {"typist": typist}, "learn": {"encoding_s": encoding_s}},
                      schedule={"sessions": sessions, "trials_per_session": 30})


def test_budget_of_one_goes_to_the_most_frequent_command_whose_learning_pays() -> None:
    """Common practice, no source: with one hotkey to give, the most frequent command whose
    learning pays gets it. Commands differ only in frequency; 'pays' is the planner's own
    break-even (the command's value with a hotkey beats the menu only). Across typists, learning
    costs and horizons, both cases occur: some command pays (then the most frequent one does and
    gets the key) and none pays (no key is handed out)."""
    seen = set()
    for typist in ("best_typist", "average_skilled_typist", "average_non_secretary", "worst_typist"):
        for encoding_s in (0.5, 4.0, 30.0):
            for sessions in (2, 8):
                world = _frequency_only_world(typist, encoding_s, sessions)
                table = planner_savings(world, (2,), keyboard_share=0.0, n_bins=20)
                saving = table.saving_s[:, 0]
                chosen = solve_exact(table.for_combos([KeyCombo("Ctrl+J", 2)]), 1)
                pays = np.flatnonzero(saving > 0)
                assert np.all(np.diff(saving) <= 1e-9), (typist, encoding_s, sessions, saving)
                if len(pays):
                    assert chosen.pairs == ((int(pays[0]), 0),) and pays[0] == 0
                else:
                    assert chosen.pairs == ()
                seen.add(bool(len(pays)))
    assert seen == {True, False}


def test_budget_curve_is_monotone_and_flat_once_no_hotkey_pays() -> None:
    world = make_world()
    table = planner_savings(world, n_bins=20)
    curve = budget_curve(table, combo_pool(2, 6, 6), range(0, 14))
    assert curve["exact_saving_s"].iloc[0] == 0.0
    assert np.all(np.diff(curve["exact_saving_s"]) >= -1e-9)
    paying = int((table.saving_s.max(axis=1) > 0).sum())
    assert curve["hotkeys_used"].max() == paying < 14
    assert (curve["heuristic_gap"] >= -1e-12).all()


def test_population_of_menu_users_saves_nothing_and_a_learner_saves_on_frequent_commands() -> None:
    world = make_world(schedule={"sessions": 3, "trials_per_session": 30})
    menu = population_savings(world, [{"name": "always_menu"}], (2,), seeds=range(3))
    assert np.all(menu.saving_s == 0.0)
    learner = population_savings(world, [{"name": "learn_first_k", "params": {"k": 1}}], (1, 3), seeds=range(3))
    assert learner.saving_s[0, 0] > learner.saving_s[0, 1] > 0  # the top command, one key beats three


@pytest.mark.parametrize(
    ("call", "pattern"),
    [
        (lambda: solve_exact(np.ones((2, 2)), -1), r"budget must be a whole number >= 0, got -1"),
        (lambda: solve_exact(np.full((2, 2), np.nan), 1), r"non-finite"),
        (lambda: solve_brute_force(np.ones((11, 2)), 1), r"brute force is for small sets"),
        (lambda: combos_from_labels(["Ctrl+K", "Ctrl+K"]), r"'Ctrl\+K' is listed twice"),
        (lambda: combos_from_labels(["Hyper+K"]), r"key combination: hotkey 'Hyper\+K': modifier 'Hyper'"),
        (lambda: combos_from_labels([]), r"pool of key combinations is empty"),
        (lambda: combo_pool(single=-1), r"single must be a whole number"),
        (lambda: planner_savings(make_world(), keyboard_share=1.5), r"keyboard_share must be in \[0, 1\]"),
        (lambda: planner_savings(make_world(), (2,), n_bins=8).for_combos([KeyCombo("K", 1)]),
         r"no column for \[1\] keystrokes"),
    ],
)
def test_bad_input_is_named(call, pattern: str) -> None:
    with pytest.raises(ValueError, match=pattern):
        call()


def test_cli_allot_writes_the_table_curve_and_plot(tmp_path, capsys) -> None:
    from shortcut_gym.lab.cli import main

    assert main(["allot", "--budget", "3", "--keys", "J,/,Ctrl+K,Ctrl+Shift+K", "--bins", "12",
                 "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "New pool record" in out and "exact" in out
    for name in ("savings.csv", "assignment.csv", "budget.csv", "budget.png"):
        assert (tmp_path / name).stat().st_size > 0
    assert main(["allot", "--budget", "2", "--pool", "1,2"]) == 2
    assert "--pool must be three whole numbers" in capsys.readouterr().err
