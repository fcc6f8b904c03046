"""Benchmark the agent zoo: decision cost, SB3 PPO fps, planner growth, optimality gap (see ``benchmarks.agents``).

Same as ``shortcut-gym bench --suite agents``.
"""

from __future__ import annotations

from benchmarks.agents import run

if __name__ == "__main__":
    run(quick=False)
