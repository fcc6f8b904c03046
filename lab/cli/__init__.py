"""The ``shortcut-gym`` command line: one entry point, one subcommand per lab job.

Each subcommand lives in its own module that defines ``register(subparsers)``; that function adds
the subparser and sets ``func`` to a callable taking the parsed namespace and returning an exit
code. Add a module to ``COMMAND_MODULES`` to add a subcommand.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from shortcut_gym.envs.errors import ShortcutGymError

COMMAND_MODULES: list[str] = [
    "shortcut_gym.lab.cli.simulate",
    "shortcut_gym.lab.cli.sweep",
    "shortcut_gym.lab.cli.audit",
    "shortcut_gym.lab.cli.fit",
    "shortcut_gym.lab.cli.compare",
    "shortcut_gym.lab.cli.recover",
    "shortcut_gym.lab.cli.report",
    "shortcut_gym.lab.cli.bench",
    "shortcut_gym.lab.cli.allot",
]


class CLIError(ShortcutGymError, ValueError):
    """A bad command-line value; the message names the option and the value."""


def one_line(err: BaseException) -> str:
    """The error's message on one line (a multi-line message's lines joined by '; ')."""
    lines = [line.strip() for line in str(err).splitlines() if line.strip()]
    return "; ".join(lines) or type(err).__name__


class _Parser(argparse.ArgumentParser):
    """An argument parser whose faults raise :class:`CLIError` (one line, exit 2 from ``main``)."""

    def error(self, message: str):  # type: ignore[override]
        err = CLIError(f"{message} (see '{self.prog} --help')")
        err.prog = self.prog  # type: ignore[attr-defined]
        raise err


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser with every registered subcommand."""
    parser = _Parser(
        prog="shortcut-gym",
        description="Simulate, fit, compare and sweep models of menu-to-hotkey transitions.",
    )
    sub = parser.add_subparsers(dest="command", metavar="SUBCOMMAND")
    sub.required = True
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the process exit code.

    A user's mistake (any :class:`ShortcutGymError`) prints one line naming the fault and returns 2;
    any other exception is a bug and propagates with its traceback.
    """
    parser = build_parser()
    command = "shortcut-gym"
    try:
        args = parser.parse_args(argv)
        command = f"shortcut-gym {args.command}"
        return int(args.func(args) or 0)
    except CLIError as err:
        print(f"{getattr(err, 'prog', command)}: error: {one_line(err)}", file=sys.stderr)
        return 2
    except ShortcutGymError as err:
        print(f"{command}: error: {one_line(err)}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    raise SystemExit(main())
