"""The ``shortcut-gym`` command line: one entry point, one subcommand per lab job.

Each subcommand lives in its own module that defines ``register(subparsers)``; that function adds
the subparser and sets ``func`` to a callable taking the parsed namespace and returning an exit
code. Add a module to ``COMMAND_MODULES`` to add a subcommand.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import os
import sys

from shortcut_gym.envs.errors import ShortcutGymError

COMMAND_MODULES: list[str] = [
    "shortcut_gym.lab.cli.simulate",
    "shortcut_gym.lab.cli.train",
    "shortcut_gym.lab.cli.score",
    "shortcut_gym.lab.cli.sweep",
    "shortcut_gym.lab.cli.audit",
    "shortcut_gym.lab.cli.fit",
    "shortcut_gym.lab.cli.compare",
    "shortcut_gym.lab.cli.recover",
    "shortcut_gym.lab.cli.report",
    "shortcut_gym.lab.cli.bench",
    "shortcut_gym.lab.cli.allot",
    "shortcut_gym.lab.cli.aids",
    "shortcut_gym.lab.cli.yardstick",
]

#: Logger of the lines saying what a subcommand is doing (world, agents, users, outputs): shown by -v only.
DETAIL_LOGGER = "shortcut_gym.cli.detail"


class CLIError(ShortcutGymError, ValueError):
    """A bad command-line value; the message names the option and the value."""


def one_line(err: BaseException) -> str:
    """The error's message on one line (a multi-line message's lines joined by '; ')."""
    lines = [line.strip() for line in str(err).splitlines() if line.strip()]
    out = ""
    for i, line in enumerate(lines):  # a heading ending in ':' runs on with a space, not ':;'
        out += line if i == 0 else (" " if lines[i - 1].endswith(":") else "; ") + line
    return out or type(err).__name__


#: The global flags of the whole CLI, told apart from a subcommand's own options when misplaced.
GLOBAL_FLAGS = ("-v", "--verbose", "-q")


class _Parser(argparse.ArgumentParser):
    """An argument parser whose faults raise :class:`CLIError` (one line, exit 2 from ``main``)."""

    def error(self, message: str):  # type: ignore[override]
        extra = message.partition("unrecognized arguments:")[2].split()
        if any(a in GLOBAL_FLAGS for a in extra):  # a global flag given after the subcommand
            message += "; -v/--verbose and -q go before the subcommand (shortcut-gym -v SUBCOMMAND ...)"
        err = CLIError(f"{message} (see '{self.prog} --help')")
        err.prog = self.prog  # type: ignore[attr-defined]
        raise err


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser with every registered subcommand."""
    parser = _Parser(
        prog="shortcut-gym",
        description="Simulate, fit, compare and sweep models of menu-to-hotkey transitions.",
    )
    from shortcut_gym import __version__

    parser.add_argument("--version", action="version", version=f"shortcut-gym {__version__}")
    talk = parser.add_mutually_exclusive_group()
    talk.add_argument("-v", "--verbose", action="store_true", dest="log_verbose",
                      help="also say what is being done (world, agents, users, outputs) and show debug "
                           "messages, each line led by its level (on stderr; give it before the subcommand)")
    talk.add_argument("-q", "--quiet", action="store_true", dest="log_quiet",
                      help="show only warnings and errors: no status lines, no progress bars (on stderr; give it "
                           "before the subcommand; implies the subcommand's own --quiet)")
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
    # the library logs status through the "shortcut_gym" logger; the CLI shows it on stderr
    # (results go to stdout), for this call only. What a subcommand is doing (its "detail" logger)
    # is shown with -v only; -q leaves warnings and errors.
    package_log = logging.getLogger("shortcut_gym")
    detail_log = logging.getLogger(DETAIL_LOGGER)
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("%(message)s"))
    old_levels = package_log.level, detail_log.level
    package_log.addHandler(handler)
    try:
        args = parser.parse_args(argv)
        if args.log_verbose:
            package_log.setLevel(logging.DEBUG)
            detail_log.setLevel(logging.NOTSET)
            handler.setFormatter(logging.Formatter("%(levelname)s: %(message)s"))
        else:
            package_log.setLevel(logging.WARNING if args.log_quiet else logging.INFO)
            detail_log.setLevel(logging.WARNING)
        if args.log_quiet and hasattr(args, "quiet"):
            args.quiet = True  # the global -q silences the subcommand's progress bars too
        command = f"shortcut-gym {args.command}"
        logging.getLogger(DETAIL_LOGGER).info("%s", command)
        code = int(args.func(args) or 0)
        sys.stdout.flush()  # a closed pipe shows here, not at the interpreter's exit
        return code
    except BrokenPipeError:
        # the reader of stdout went away (``shortcut-gym ... | head``): not a fault; stop writing
        # there quietly (Python's documented idiom) and exit as a process killed by SIGPIPE would
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 128 + 13
    except CLIError as err:
        print(f"{getattr(err, 'prog', command)}: error: {one_line(err)}", file=sys.stderr)
        return 2
    except ShortcutGymError as err:
        print(f"{command}: error: {one_line(err)}", file=sys.stderr)
        return 2
    finally:
        package_log.removeHandler(handler)
        package_log.setLevel(old_levels[0])
        detail_log.setLevel(old_levels[1])


if __name__ == "__main__":
    raise SystemExit(main())
