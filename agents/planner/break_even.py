"""Break-even per command: the later uses after which learning the hotkey at first use pays.

The question is the one the break-even map asks of two policies the simulator can run: every
command learned at its first use and tried by hotkey after that (learn-first-1) against every
command by menu (always-menu), compared on each command's own trials. The cost formulas are the
world's (:func:`.action_costs.action_times`, each trial paying the homing it makes, as the simulator
charges it); what recall is along the learn-then-hotkey path is read from the simulator's own
memory: :func:`learn_once_recall` runs learn-first-1 on simulated users of the world's batched
simulator (users seeded from :data:`.selection.SELECTION_SEED`: common random numbers, not the users
an evaluation scores) and records, at each later use, the kernel's recall probability, the recall
latency F e^-A it implies and where the hand was. (The planner's two-number memory overestimated
that recall: 0.885 / 0.640 against 0.817 / 0.492 simulated for the top two commands at threshold -2.)
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from shortcut_gym.agents.planner.action_costs import action_times
from shortcut_gym.agents.planner.search import expected_uses
from shortcut_gym.agents.planner.selection import SELECTION_SEED, PolicyChoice, _RuleAgent
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World

#: Simulated users the recall along the learn-then-hotkey path is averaged over by default.
PATH_USERS = 256


def learn_once_recall(world: World, n_users: int = PATH_USERS) -> list[np.ndarray]:
    """Per command, (later uses, 3): at the j-th use after the learning one (rows j = 1, 2, ...,
    up to p_c x horizon - 1, at least 1), the mean recall probability over the simulated users that
    reach it, the mean latency of a recall F e^-A weighted by recall (s), and the share of those
    hotkey attempts that find the hand on the keyboard; NaN where no simulated user reaches it."""
    from shortcut_gym.agents.rollout import context_of_world, drive_batch
    from shortcut_gym.envs.simulator import BatchSimulator

    if int(n_users) != n_users or n_users < 1:
        raise ConfigError(f"n_users must be a whole number >= 1, got {n_users}")
    seeds = [SELECTION_SEED + i for i in range(int(n_users))]
    agent = _RuleAgent(PolicyChoice("learn_first_k", 1))
    agent.bind(context_of_world(world))
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds)
    cmd = np.array(sim.sched_command, copy=True)
    trials = drive_batch(sim, agent, seeds, keep_trials=True).trials
    assert trials is not None
    m = world.memory
    p = np.clip(trials.p_recall, 0.0, 1.0)
    with np.errstate(divide="ignore"):
        act = m.threshold + m.noise_s * (np.log(p) - np.log1p(-p))  # the kernel's A from its logistic p
        lat = np.where(p > 0, m.latency_factor_s * np.exp(-np.minimum(act, 700.0)), 0.0)
    on_kb = np.zeros_like(p, dtype=bool)
    on_kb[:, 1:] = trials.outcome[:, :-1] == k.OUT_HOTKEY  # each user starts on the mouse
    out = []
    for c in range(world.commands.n_commands):
        mine = cmd == c
        order = np.cumsum(mine, axis=1) - 1  # the use index of each trial of c (0: the learning one)
        rows = []
        for j in range(1, max(expected_uses(world, c) - 1, 1) + 1):
            at = mine & (order == j)
            if not at.any():
                rows.append((math.nan, math.nan, math.nan))
                continue
            pj = float(p[at].mean())
            rows.append((pj, float((p[at] * lat[at]).sum() / p[at].sum()) if pj > 0 else 0.0, float(on_kb[at].mean())))
        out.append(np.asarray(rows))
    return out


def _novice_sum(gap_s: float, first: int, count: float) -> float:
    """Sum of the novice menu terms gap / t for selections t = first .. first + count - 1 (count
    fractional: the last one partly)."""
    whole = int(math.floor(count))
    total = sum(gap_s / t for t in range(first, first + whole))
    return total + (count - whole) * gap_s / (first + whole)


def break_even_table(world: World, keyboard_share: float | None = None, n_users: int = PATH_USERS) -> pd.DataFrame:
    """Per command: learning pays when the command's expected time over its U = p_c x horizon uses
    is smaller learned at first use than by menu.

    Menu world: every use a menu selection (hand on the mouse), the t-th paying the novice term
    (search - decision) / t of the menu model (Cockburn, Gutwin & Greenberg 2007). Learning world:
    the learning trial, then U - 1 hotkey attempts, each recalled with p (the simulated mean over
    those uses, :func:`learn_once_recall`) at the simulated latency, the hand on the keyboard before
    it with the simulated share, a failure paying the attempt and a menu selection (novice term
    included). ``break_even_uses`` solves U* x net saving per use = learning cost (expertise terms
    left out); ``learning_pays`` is the full comparison at U. A number ``keyboard_share`` replaces
    the simulated hand share before every trial of both worlds. Each homing is counted once, by
    the trial that makes it (as the simulator charges it); ``return_trip_s`` shows the homing a
    recalled hotkey leaves to the next trial, which the planner's decision values charge as well.
    """
    recall = learn_once_recall(world, n_users)
    cmdc = world.command_constants()
    home = world.costs.klm.home_s
    rows = []
    for c in range(world.commands.n_commands):
        r = recall[c]
        seen = np.isfinite(r[:, 0])
        p = float(r[seen, 0].mean()) if seen.any() else 0.0
        pw = r[seen, 0]
        latency = float(np.dot(pw, r[seen, 1]) / pw.sum()) if pw.sum() > 0 else 0.0
        share = float(r[seen, 2].mean()) if seen.any() else 0.0
        learner_share = share if keyboard_share is None else float(keyboard_share)
        menu_world = action_times(world, c, 0.0 if keyboard_share is None else float(keyboard_share))
        times = action_times(world, c, learner_share)
        ok = times.hotkey_fixed_s + latency
        saving = menu_world.menu_s - ok
        error = (1 - p) * (times.failure_s - ok)
        net = saving - error
        cost = times.learn_s - menu_world.menu_s
        be = cost / net if net > 0 else math.inf
        expected = float(world.commands.probability[c] * world.horizon)
        gap_s = float(cmdc[c, k.C_SEARCH] - cmdc[c, k.C_DECISION])
        later = max(expected - 1.0, 0.0)
        menu_total = expected * menu_world.menu_s + _novice_sum(gap_s, 1, expected)
        learn_total = (times.learn_s + gap_s + later * (p * ok + (1 - p) * times.failure_s)
                       + _novice_sum(gap_s, 2, later * (1 - p)))
        rows.append({
            "command": c, "command_name": world.commands.names[c],
            "usage_probability": float(world.commands.probability[c]), "expected_uses": expected,
            "menu_s": menu_world.menu_s, "learn_s": times.learn_s, "hotkey_recalled_s": ok,
            "hotkey_failed_s": times.failure_s, "p_recall_after_learning": float(r[0, 0]) if seen[0] else math.nan,
            "mean_p_recall": p, "keyboard_share_learning": learner_share, "learning_cost_s": cost,
            "saving_per_use_s": saving, "error_cost_per_use_s": error, "return_trip_s": (1.0 - share) * home,
            "break_even_uses": be, "menu_world_s": menu_total, "learning_world_s": learn_total,
            "learning_pays": bool(learn_total < menu_total),
        })
    return pd.DataFrame(rows)
