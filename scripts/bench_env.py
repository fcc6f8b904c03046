"""Step cost of CommandSelection-v0 versus CartPole-v1 (see ``benchmarks.env``).

Same as ``shortcut-gym bench --suite env``.
"""

from __future__ import annotations

from benchmarks.env import run


def main() -> None:
    run(quick=False)


if __name__ == "__main__":
    main()
