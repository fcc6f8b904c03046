"""Demo section: the designer's two questions on Tidepool Logbook.

1. Which interface aid makes hotkeys pay off soonest, and for whom? The bundled aid study
   (configs/studies/tidepool_aids.yaml: five aids x four typist classes), run here with the
   learning model and the fixed baselines only, on fewer users, so the demo stays quick; the
   full study (with the planner) is ``shortcut-gym aids tidepool_aids --out FOLDER``.
2. Given a few free key combinations, which commands should get them? The planner prices each
   command's hotkey for each chord length; an integer program picks the best assignment.
"""

from __future__ import annotations

from pathlib import Path

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.design.aid_study import StudyAgent, load_study, run_study
from shortcut_gym.lab.design.assignment import budget_curve, combo_pool, planner_savings, solve_exact
from shortcut_gym.lab.design.plots import aid_figure, budget_figure, save_figure
from shortcut_gym.lab.sweep.spec import SeedBlock

#: The agents the demo's aid study simulates (the bundled study adds the planner).
DEMO_AGENTS = [{"name": "rescorla_wagner"}, {"name": "learn_first_k", "params": {"k": 1}}, {"name": "always_menu"}]


def aid_section(out: Path, users: int = 100) -> None:
    """Rank the five aids per typist class and agent; writes aids_ranking.csv and aids.png."""
    spec, aids = load_study("tidepool_aids")
    spec = spec.model_copy(update={"agents": [StudyAgent(**a) for a in DEMO_AGENTS],
                                   "users": SeedBlock(first=0, count=users)})
    table = run_study(spec, aids)
    path = spec.population.path
    table.to_csv(out / "aids_ranking.csv", index=False)
    save_figure(aid_figure(table, path, "Tidepool Logbook: time saved per user by each aid"), out / "aids.png")
    print(f"\n== Interface aids on '{spec.base.scenario}' ({users} simulated users per cell; seconds saved per "
          "user over the horizon, the aid's own costs included)")
    best = table[table["rank"] == 1]
    print(best[[path, "agent", "aid", "saved_s", "pays_share", "first_session_hotkey_share",
                "base_first_session_hotkey_share"]].to_string(index=False, float_format=lambda v: f"{v:.2f}"))


def assignment_section(out: Path, budget: int = 4) -> None:
    """Hand out ``budget`` free combinations (2 single keys, 4 one-modifier, 4 two-modifier chords)."""
    world = make_world(schedule={"sessions": 4})
    table = planner_savings(world, n_bins=12)
    pool = combo_pool(2, 4, 4)
    chosen = solve_exact(table.for_combos(pool), budget).frame(table, pool)
    curve = budget_curve(table, pool, range(budget + 1))
    chosen.to_csv(out / "assignment.csv", index=False)
    curve.to_csv(out / "budget.csv", index=False)
    save_figure(budget_figure(curve, "Tidepool Logbook: hotkey budget"), out / "budget.png")
    print(f"\n== Which commands get {budget} free key combinations ({world.horizon} trials per user, planner-priced)")
    print(chosen.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    print(curve.drop(columns="commands").to_string(index=False, float_format=lambda v: f"{v:.2f}"))
