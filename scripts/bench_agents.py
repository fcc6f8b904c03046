"""Benchmark the agent zoo: decision cost, SB3 PPO fps, planner growth (see ``shortcut_gym.lab.bench_agents``).

Same as ``shortcut-gym bench --suite agents``.
"""

from __future__ import annotations

from shortcut_gym.lab.bench_agents import run

if __name__ == "__main__":
    run(quick=False)
