"""Analytic break-even per command: the uses after which learning the hotkey pays.

It compares two worlds: every command by menu, and every command learned at its first use and
tried by hotkey after that, each trial paying its own homing. p and the latency are the means
over the command's expected later uses in the planner's memory model. Menu expertise is ignored
(e = 1 in both worlds).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from shortcut_gym.agents.planner.action_costs import action_times
from shortcut_gym.agents.planner.mdp import build_command_mdp
from shortcut_gym.agents.planner.search import expected_uses
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.world import World


def learn_once_recall(world: World, n_bins: int, n_weight_bins: int = 10) -> list[np.ndarray]:
    """Per command, (later uses, 2): the expected recall probability and latency (s) at each later
    use when the first use learns and every later one tries the hotkey (the planner's transition model)."""
    out = []
    for c in range(world.commands.n_commands):
        mdp = build_command_mdp(world, c, n_bins, 0.0, 0.0, n_weight_bins)
        dist = mdp.P[k.LEARN, 0].copy()
        lat = np.where(np.isfinite(mdp.activation), world.memory.latency_factor_s * np.exp(-mdp.activation), 0.0)
        rows = []
        for _ in range(max(expected_uses(world, c) - 1, 1)):
            p_j = float(np.dot(dist, mdp.p_recall))
            rows.append((p_j, float(np.dot(dist * mdp.p_recall, lat)) / p_j if p_j > 0 else 0.0))
            dist = dist @ mdp.P[k.HOTKEY]
        out.append(np.asarray(rows))
    return out


def break_even_table(world: World, keyboard_share: float | None = None, n_bins: int = 40) -> pd.DataFrame:
    """Analytic break-even per command: learning pays when expected future uses U satisfy
    U (menu - E[hotkey]) > learning cost, E[hotkey] = p ok + (1 - p) failure, i.e. when
    U x saving > learning cost + U x expected error cost, so U* = learning cost / (saving - error cost).

    p and the recall latency are the means over the command's expected later uses
    (p_c x horizon - 1), starting from one learning trace and laying the hotkey traces;
    ``p_recall_after_learning`` is p at the next use. Hand: ``keyboard_share`` None (default) puts
    the hand on the mouse throughout the menu world and, in the learning world, on the keyboard
    before a trial with the usage-weighted share of recalled hotkeys there; a number is the share
    before every trial of both worlds. Times in seconds.
    """
    recall = learn_once_recall(world, n_bins)
    if keyboard_share is None:
        prob = world.commands.probability
        learner_share = float(sum(prob[c] * r[:, 0].sum() / (len(r) + 1) for c, r in enumerate(recall)))
        menu_share = 0.0
    else:
        learner_share = menu_share = float(keyboard_share)
    rows = []
    for c in range(world.commands.n_commands):
        menu_world = action_times(world, c, menu_share)
        times = action_times(world, c, learner_share)
        p = float(recall[c][:, 0].mean())
        pw = recall[c][:, 0]
        latency = float(np.dot(pw, recall[c][:, 1]) / pw.sum()) if pw.sum() > 0 else 0.0
        ok = times.hotkey_fixed_s + latency
        saving = menu_world.menu_s - ok
        error = (1 - p) * (times.failure_s - ok)
        net = saving - error
        cost = times.learn_s - menu_world.menu_s
        be = cost / net if net > 0 else math.inf
        expected = float(world.commands.probability[c] * world.horizon)
        rows.append({
            "command": c, "command_name": world.commands.names[c],
            "usage_probability": float(world.commands.probability[c]), "expected_uses": expected,
            "menu_s": menu_world.menu_s, "learn_s": times.learn_s, "hotkey_recalled_s": ok,
            "hotkey_failed_s": times.failure_s, "p_recall_after_learning": float(recall[c][0, 0]),
            "mean_p_recall": p, "keyboard_share_learning": learner_share, "learning_cost_s": cost,
            "saving_per_use_s": saving, "error_cost_per_use_s": error, "break_even_uses": be,
            "learning_pays": expected - 1 > be,
        })
    return pd.DataFrame(rows)
