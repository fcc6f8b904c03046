"""The library minds its manners: the global matplotlib backend is left as the user set it, pyplot
is never imported, and library calls print nothing (stdout and stderr stay empty; status goes
through the ``shortcut_gym`` logger, which has only a NullHandler)."""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap
from pathlib import Path

WORKFLOW = textwrap.dedent('''
    import contextlib, io, json, logging, sys
    import matplotlib
    matplotlib.use("svg")  # the user's choice (a notebook would have its inline backend)
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        import numpy as np
        import pandas as pd
        import gymnasium as gym
        import shortcut_gym
        from shortcut_gym.agents import make_agent, run_episode
        from shortcut_gym.envs import make_world
        from shortcut_gym.lab.checks.predictive import plot_predictive
        from shortcut_gym.lab.data.logs import log_from_simulation, validate_log
        from shortcut_gym.lab.design.plots import budget_figure, save_figure
        from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_log
        from shortcut_gym.lab.report.plots import plot_confusion, plot_parameter_recovery
        from shortcut_gym.lab.simulate import simulate_agents
        from shortcut_gym.lab.sweep.runner import run_sweep

        folder = sys.argv[1]
        env = gym.make("shortcut_gym/CommandSelection-v0", render_mode="rgb_array",
                       schedule={"sessions": 1, "trials_per_session": 6})
        env.reset(seed=0)
        frame = env.render()
        run_episode(env, make_agent("learn_first_k", k=1), seed=0)
        world = make_world(schedule={"sessions": 2, "trials_per_session": 10})
        trials = simulate_agents(world, [{"name": "rescorla_wagner"}], [0, 1])
        log = validate_log(log_from_simulation(trials, world.commands), world.commands)
        fits = fit_log(log, [ModelSpec("static_softmax")], context_for(log, world.commands.names), n_starts=1)
        report = run_sweep({"name": "manners", "base": {"schedule": {"sessions": 2, "trials_per_session": 5}},
                            "vary": {"parameters": {"costs.klm.keystroke_s": {"values": [0.2, 0.3]}}},
                            "agents": [{"name": "always_menu"}, {"name": "learn_first_k", "params": {"k": 1}}],
                            "seeds": {"count": 2}}, folder + "/sweep", workers=1)  # default: no progress bar
        pairs = pd.DataFrame({"parameter": ["a"] * 3, "true": [1.0, 2.0, 3.0], "fitted": [1.1, 1.9, 3.2]})
        plot_parameter_recovery(pairs, pd.DataFrame({"parameter": ["a"], "correlation": [0.99]}), folder + "/r.png")
        plot_confusion(pd.DataFrame([[0.9, 0.1], [0.2, 0.8]], index=["x", "y"], columns=["x", "y"]), folder + "/c.png")
        group = pd.DataFrame({"model": ["m"] * 2, "block": [0, 1], "data_mean": [0.1, 0.4], "model_mean": [0.2, 0.3],
                              "model_lo": [0.1, 0.2], "model_hi": [0.3, 0.5], "interval": [0.9, 0.9]})
        plot_predictive(group, folder + "/p.png")
        curve = pd.DataFrame({"budget": [0, 1, 2], "exact_saving_s": [0.0, 3.0, 4.0],
                              "heuristic_saving_s": [0.0, 3.0, 3.5], "commands": ["", "a", "a,b"]})
        save_figure(budget_figure(curve), __import__("pathlib").Path(folder) / "b.png")
        logging.getLogger("shortcut_gym.lab").warning("a warning nobody asked to see")
    print(json.dumps({"backend": matplotlib.get_backend(), "pyplot": "matplotlib.pyplot" in sys.modules,
                      "stdout": out.getvalue(), "stderr": err.getvalue(), "frame": list(frame.shape),
                      "fits": len(fits), "runs": report.computed}))
''')


def test_library_calls_leave_the_backend_alone_and_print_nothing(tmp_path: Path) -> None:
    script = tmp_path / "workflow.py"
    script.write_text(WORKFLOW)
    done = subprocess.run([sys.executable, str(script), str(tmp_path)], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    seen = json.loads(done.stdout.strip().splitlines()[-1])
    assert seen["backend"] == "svg"  # the user's backend, unchanged by rendering and every plot
    assert seen["pyplot"] is False
    assert seen["stdout"] == "" and seen["stderr"] == ""
    assert seen["frame"][2] == 3 and seen["fits"] == 2 and seen["runs"] == 4  # the calls did run
    for name in ("r.png", "c.png", "p.png", "b.png"):
        assert (tmp_path / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert list((tmp_path / "sweep").rglob("*.png"))  # the sweep drew its plots too
