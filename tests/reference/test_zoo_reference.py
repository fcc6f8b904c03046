"""Reference checks of the agent zoo against published closed forms and an outside MDP solver."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import scipy.special

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.base import AgentContext, Transition
from shortcut_gym.agents.planner import break_even_table, build_command_mdp, plan_world, solve_finite_horizon
from shortcut_gym.envs.kernel import C_DECISION, LEARN, MENU
from shortcut_gym.envs.world import make_world


def _feed(agent, command: int, action: int, outcome: str, duration_s: float, trial: int) -> None:
    info = {"command": command, "action": action, "outcome": outcome, "duration_s": duration_s,
            "onset_s": 45.0 * trial, "trial": trial, "session": 0}
    agent.observe(Transition(np.zeros(0), action, -duration_s, np.zeros(0), info))


def test_rescorla_wagner_acquisition_closed_form():
    """Rescorla & Wagner (1972), "A theory of Pavlovian conditioning": with V_0 = 0 and a constant
    outcome lambda, the delta rule V <- V + alpha (lambda - V) gives V_n = lambda (1 - (1 - alpha)^n)."""
    alpha, duration = 0.23, 3.7
    lam = -duration  # reward = -seconds
    agent = make_agent("rescorla_wagner", mechanisms=["value"], options={"prior_time_s": 0.0}, alpha=alpha)
    agent.bind(AgentContext(n_commands=3, horizon=50))
    agent.reset(0)
    for n in range(1, 21):
        _feed(agent, 1, MENU, "menu", duration, n)
        expected = lam * (1 - (1 - alpha) ** n)
        assert agent.action_values(1)[MENU] == pytest.approx(expected, rel=1e-12, abs=1e-12)
    # other commands and actions untouched
    assert agent.action_values(0)[MENU] == 0.0 and agent.action_values(1)[LEARN] == 0.0


def test_softmax_probabilities_equal_scipy():
    """Softmax choice rule P(a) = exp(beta Q_a) / sum_b exp(beta Q_b) (Wilson & Collins 2019, eLife,
    "Ten simple rules for the computational modeling of behavioral data", eq. for model 3)
    equals scipy.special.softmax on beta * Q."""
    beta = 1.7
    agent = make_agent("rescorla_wagner", mechanisms=["value"], alpha=0.4, beta=beta)
    agent.bind(AgentContext(n_commands=2, horizon=50))
    agent.reset(0)
    for t, (a, outcome, d) in enumerate([(0, "menu", 3.4), (1, "hotkey_forgotten", 6.1), (2, "learned", 5.0),
                                         (1, "hotkey", 2.2), (0, "menu", 3.1)]):
        _feed(agent, 0, a, outcome, d, t)
        p = agent.action_probabilities(np.zeros(0), {"target": 0, "next_trial": t + 1})
        np.testing.assert_allclose(p, scipy.special.softmax(beta * agent.action_values(0)), rtol=1e-12)


def _small_world(**memory):
    return make_world(schedule={"sessions": 3, "trials_per_session": 20}, memory=memory or None)


@pytest.mark.parametrize("memory", [{}, {"kind": "exponential", "exponential_rate_per_s": 1e-5}])
def test_planner_equals_pymdptoolbox_finite_horizon(memory):
    """Backward induction (Bellman 1957; Puterman 1994, ch. 4) on the planner's own discretised MDP
    equals pymdptoolbox's FiniteHorizon (Chades et al. 2014, "MDPtoolbox: a multi-platform toolbox to
    solve stochastic dynamic programming problems", Ecography 37): V is states x (N+1) with column
    N - n holding our V_n, policy is states x N."""
    mdptoolbox_mdp = pytest.importorskip("mdptoolbox.mdp")
    world = _small_world(**memory)
    actions_seen: set[int] = set()
    for command in (0, 5):
        mdp = build_command_mdp(world, command, n_bins=12)
        np.testing.assert_allclose(mdp.P.sum(axis=2), 1.0, atol=1e-12)
        n = 25
        V, policy = solve_finite_horizon(mdp.P, mdp.R, n)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fh = mdptoolbox_mdp.FiniteHorizon(mdp.P, mdp.R, 1.0, n)
            fh.run()
        for stages_left in range(1, n + 1):
            np.testing.assert_allclose(V[stages_left], fh.V[:, n - stages_left], rtol=1e-10, atol=1e-10)
            # compare actions wherever the best action is not a near-tie
            Q = mdp.R.T + mdp.P @ V[stages_left - 1]
            top2 = np.sort(Q, axis=0)[-2:]
            clear = (top2[1] - top2[0]) > 1e-9
            assert np.array_equal(policy[stages_left][clear], np.asarray(fh.policy[:, n - stages_left])[clear])
        actions_seen |= set(np.unique(policy[1:]).tolist())
    # the solutions are not trivial: some state learns and some state uses the menu
    assert {LEARN, MENU} <= actions_seen


def test_break_even_matches_planner_switch_point_worked_by_hand():
    """Analytic break-even (learning pays when U (menu - hotkey) > learning cost) against the
    planner's switch point, in a world where recall after one learning trace is certain.

    Set-up: exponential memory with negligible decay (1e-9 /s), threshold -10 (so p = 1 - 3e-12 once a
    trace exists), failed attempts and menu use lay no trace, no commission errors, hand always on
    the mouse (keyboard_share 0: the same share before every trial), encoding 2.5 s, novice menu
    search equal to the decision time (no expertise term). Command 0 ("New pool record", Ctrl+N) is item 0
    of the 4-item Survey menu. Defaults: Card, Moran & Newell (1980) M 1.35, P 1.1, B 0.1, H 0.4,
    K 0.20 (average skilled typist); Fitts a = -0.107, b = 0.223 s/bit; Hick-Hyman 0.08 + 0.15 log2(1/p).
    Zipf over 12 commands: Survey holds ranks 1-4, weights 1, 1/2, 1/3, 1/4 (sum 2.0833),
    so command 0's within-menu probability is 0.48.
      decision = 0.08 + 0.15 log2(1/0.48) = 0.08 + 0.15 * 1.0589 = 0.2388 s
      pointing = -0.107 + 0.223 log2(0.5 + 1) = -0.107 + 0.223 * 0.5850 = 0.0235 s
      menu     = M + P + 4B + decision + pointing = 1.35 + 1.1 + 0.4 + 0.2388 + 0.0235 = 3.1123 s
      hotkey   = M + H + 2K (+ recall latency ~0) = 1.35 + 0.4 + 0.4 = 2.15 s
      U*       = 2.5 / (3.1123 - 2.15) = 2.5 / 0.9623 = 2.598 future uses
    That is the break-even table's rule, which compares two worlds trial by trial (each trial pays
    its own homing). The planner prices one decision inside a world whose other trials keep the
    hand on the mouse (keyboard_share 0 is also the share of next trials that start with a
    hotkey), so a recalled hotkey also costs the next trial's return to the mouse, H:
      hotkey (marginal) = 2.15 + H = 2.15 + 0.4 = 2.55 s
      U*_plan           = 2.5 / (3.1123 - 2.55) = 2.5 / 0.5623 = 4.446 future uses
    So the planner learns from 5 future uses on: with n uses left (this one included), learn iff
    n - 1 >= 5, i.e. it switches from menu to learn at n = 6. With H = 0 the two rules coincide:
    menu = 3.1123 - 0 (no H in it either way), hotkey = 1.75 s, U* = 2.5 / 1.3623 = 1.835, so
    the planner learns iff n - 1 >= 2, switching at n = 3.
    """
    memory = {"kind": "exponential", "exponential_rate_per_s": 1e-9, "threshold": -10.0,
              "latency_factor_s": 1e-12, "weights": {"hotkey_failure": 0.0, "menu": 0.0}}
    costs = {"learn": {"encoding_s": 2.5}, "errors": {"commission_share": 0.0}}
    decision = float(make_world(costs=costs, memory=memory).command_constants()[0, C_DECISION])
    # the novice visual search of command 0's 4-item menu set equal to its decision time, so menu
    # expertise (search -> decision over the first selections) plays no part in either rule
    costs["menu"] = {"search_intercept_s": 0.0, "search_slope_s_per_item": decision / 4}
    world = make_world(costs=costs, memory=memory, schedule={"sessions": 2, "trials_per_session": 40})
    table = break_even_table(world, keyboard_share=0.0)
    row = table.iloc[0]
    assert row["menu_s"] == pytest.approx(3.1123, abs=1e-3)
    assert row["hotkey_recalled_s"] == pytest.approx(2.15, abs=1e-3)
    assert row["break_even_uses"] == pytest.approx(2.598, abs=5e-3)
    plan = plan_world(world, max_uses=10, keyboard_share=0.0)
    no_trace = plan.policy[0][1:, 0]  # uses left 1..10, no-trace state
    switch = 1 + int(np.argmax(no_trace == LEARN))
    assert switch == 6
    assert math.floor(2.5 / (row["menu_s"] - row["hotkey_recalled_s"] - 0.4)) + 2 == switch
    assert np.all(no_trace[:5] == MENU) and np.all(no_trace[5:] == LEARN)
    # without homing time the table's break-even and the planner's switch point are the same rule
    flat = world.with_changes(costs=world.costs.model_copy(update={"klm": world.costs.klm.model_copy(
        update={"home_s": 0.0})}))
    row0 = break_even_table(flat, keyboard_share=0.0).iloc[0]
    assert row0["hotkey_recalled_s"] == pytest.approx(1.75, abs=1e-3)
    assert row0["break_even_uses"] == pytest.approx(1.835, abs=5e-3)
    no_trace0 = plan_world(flat, max_uses=10, keyboard_share=0.0).policy[0][1:, 0]
    assert 1 + int(np.argmax(no_trace0 == LEARN)) == math.floor(row0["break_even_uses"]) + 2 == 3


@pytest.mark.parametrize("kwargs", [
    {"n_commands": 1, "sessions": 2, "trials_per_session": 2, "threshold": -2.0, "gap_h": 720.0},
    {"n_commands": 2, "sessions": 1, "trials_per_session": 3, "encoding_s": 0.5, "keystroke_s": 0.08},
    {"n_commands": 1, "sessions": 2, "trials_per_session": 2, "memory_kind": "exponential"},
], ids=["one_command_hard_recall", "two_commands", "exponential"])
def test_exact_small_world_solver_equals_pymdptoolbox_finite_horizon(kwargs):
    """The exact small-world MDP (every decision state of the simulator's full state, one end state)
    solved by our stage-wise backward induction (Bellman 1957; Puterman 1994, ch. 4) against
    pymdptoolbox's FiniteHorizon (Chades et al. 2014, "MDPtoolbox: a multi-platform toolbox to solve
    stochastic dynamic programming problems", Ecography 37) on the same P and R, with N = horizon
    stages: its V[:, 0] is the optimum of every state (the end state is absorbing at reward 0).
    The MDP passes pymdptoolbox's own check of P and R."""
    mdptoolbox_mdp = pytest.importorskip("mdptoolbox.mdp")
    from mdptoolbox.util import check

    from shortcut_gym.agents.planner.exact import exact_mdp, small_world

    world = small_world(**kwargs)
    m = exact_mdp(world)
    dense = np.stack([p.toarray() for p in m.P])
    check(dense, m.R)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fh = mdptoolbox_mdp.FiniteHorizon(dense, m.R, 1.0, world.horizon)
        fh.run()
    np.testing.assert_allclose(m.V, fh.V[:, 0], rtol=1e-12, atol=1e-10)
    Q = m.R + np.stack([p @ m.V for p in m.P], axis=1)  # (S, actions)
    top2 = np.sort(Q, axis=1)[:, -2:]
    clear = (top2[:, 1] - top2[:, 0]) > 1e-9
    assert np.array_equal(m.policy[clear], np.asarray(fh.policy[:, 0])[clear])
    assert m.n_states > 20 and len(set(m.policy[m.stage < world.horizon].tolist())) >= 2  # not trivial
