"""The ``shortcut-gym`` command line: one entry point, one subcommand per lab job.

Each subcommand lives in its own module that defines ``register(subparsers)``; that function adds
the subparser and sets ``func`` to a callable taking the parsed namespace and returning an exit
code. Add a module to ``COMMAND_MODULES`` to add a subcommand.
"""

from __future__ import annotations

import argparse
import importlib
import sys

COMMAND_MODULES: list[str] = [
    "shortcut_gym.lab.cli.simulate",
    "shortcut_gym.lab.cli.sweep",
    "shortcut_gym.lab.cli.fit",
    "shortcut_gym.lab.cli.compare",
    "shortcut_gym.lab.cli.recover",
    "shortcut_gym.lab.cli.report",
    "shortcut_gym.lab.cli.bench",
]


class CLIError(ValueError):
    """A bad command-line value; the message names the option and the value."""


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser with every registered subcommand."""
    parser = argparse.ArgumentParser(
        prog="shortcut-gym",
        description="Simulate, fit, compare and sweep models of menu-to-hotkey transitions.",
    )
    sub = parser.add_subparsers(dest="command", metavar="SUBCOMMAND")
    sub.required = True
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the process exit code (2 for bad input)."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except CLIError as err:
        print(f"shortcut-gym {args.command}: error: {err}", file=sys.stderr)
        return 2
    except (ValueError, KeyError, FileNotFoundError) as err:
        print(f"shortcut-gym {args.command}: error: {err}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    raise SystemExit(main())
