"""Step cost of CommandSelection-v0 versus CartPole-v1 (see ``shortcut_gym.lab.bench_env``).

Same as ``shortcut-gym bench --suite env``.
"""

from __future__ import annotations

from shortcut_gym.lab.bench_env import run


def main() -> None:
    run(quick=False)


if __name__ == "__main__":
    main()
