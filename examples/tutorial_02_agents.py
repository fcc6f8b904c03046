"""Tutorial step 2: agents from the zoo, scored as time lost against the bounded-optimal planner.

Run: .venv/bin/python examples/tutorial_02_agents.py
"""

from __future__ import annotations

import pandas as pd

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.planner import break_even_table
from shortcut_gym.agents.scoring import time_lost_vs_planner
from shortcut_gym.envs import make_world


def main(users: int = 4) -> pd.DataFrame:
    # A shorter version of the demo scenario: 4 daily sessions of 40 trials.
    world = make_world(schedule={"sessions": 4, "trials_per_session": 40})

    # Agents are built by registry name. rescorla_wagner is the published delta-rule model (alpha, beta);
    # composed_learner has exactly the mechanisms listed (here with and without the look-ahead).
    planner = ["value", "memory_aware", "planning", "incidental", "forgetting", "perseveration", "lapse"]
    agents = {
        "always_menu": make_agent("always_menu"),
        "learn_first_k(k=1)": make_agent("learn_first_k", k=1),
        "rescorla_wagner": make_agent("rescorla_wagner"),
        "composed_learner": make_agent("composed_learner", mechanisms=planner),
        "composed_learner without planning": make_agent("composed_learner",
                                                        mechanisms=[m for m in planner if m != "planning"]),
    }
    # The planner (exact dynamic programming over a discretised memory state) is the yardstick.
    scores = time_lost_vs_planner(world, agents, seeds=range(users))
    cols = ["agent", "time_per_trial_s", "hotkey_share", "time_lost_s"]
    print(scores[cols].to_string(index=False, float_format=lambda v: f"{v:.2f}"))

    # The analytic break-even rule, per command: expected future uses above which learning pays.
    table = break_even_table(world)
    print(table[["command_name", "expected_uses", "saving_per_use_s", "break_even_uses", "learning_pays"]]
          .iloc[:3].to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    return scores


if __name__ == "__main__":
    main()
