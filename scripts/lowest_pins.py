"""Print pip pins (``name==floor``) of the direct dependencies' lower bounds in pyproject.toml.

``make test-lowest`` installs the project with these as constraints into a fresh venv, so the
declared floors are the versions actually tested. torch's floor (2.13) is the CPU wheel the Makefile
installs first (any other version would pull a CUDA build), so ``torch==2.13`` accepts ``2.13.0+cpu``.

Usage: ``python scripts/lowest_pins.py [--extra NAME ...]``; ``--check`` instead verifies that the
running interpreter has exactly those versions installed (exit 1 naming each one that differs).
"""

from __future__ import annotations

import argparse
import re
import sys
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
#: Dependencies not pinned to their floor (none: every floor is installed and checked).
NOT_PINNED: set[str] = set()

_REQ = re.compile(r"^\s*([A-Za-z0-9_.\-]+)(\[[^\]]*\])?\s*(.*)$")


def floor_pins(requirements: list[str]) -> list[str]:
    """``name==floor`` for every requirement with a ``>=`` bound (a requirement without one is refused)."""
    pins = []
    for req in requirements:
        m = _REQ.match(req)
        if m is None:
            raise SystemExit(f"cannot read requirement {req!r}")
        name, spec = m.group(1), m.group(3)
        if name.lower() in NOT_PINNED or "==" in spec:
            continue
        floor = re.search(r">=\s*([0-9][^,;\s]*)", spec)
        if floor is None:
            raise SystemExit(f"requirement {req!r} has no lower bound (>=) to test")
        pins.append(f"{name}=={floor.group(1)}")
    return pins


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--extra", action="append", default=[], help="also pin this extra's floors")
    parser.add_argument("--check", action="store_true", help="check the installed versions against the floors")
    args = parser.parse_args(argv)
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    reqs = list(project["dependencies"])
    for extra in args.extra:
        reqs += project["optional-dependencies"][extra]
    pins = floor_pins(reqs)
    if not args.check:
        sys.stdout.write("\n".join(pins) + "\n")
        return 0
    return check_installed(pins)


def check_installed(pins: list[str]) -> int:
    """0 when every pinned distribution is installed at its floor (release segments compared, so
    ``1.26`` is ``1.26.0``), else 1 with one line per difference on stderr."""
    from importlib.metadata import PackageNotFoundError, version

    def release(text: str) -> tuple[int, ...]:
        parts = [int(p) for p in re.findall(r"\d+", text.split("+")[0])[:3]]
        return tuple(parts + [0] * (3 - len(parts)))

    bad = []
    for pin in pins:
        name, floor = pin.split("==")
        try:
            have = version(name)
        except PackageNotFoundError:
            bad.append(f"{name}: not installed (floor {floor})")
            continue
        if release(have) != release(floor):
            bad.append(f"{name}: {have} installed, the floor is {floor}")
    for line in bad:
        print(line, file=sys.stderr)
    print(f"{len(pins) - len(bad)} of {len(pins)} direct dependencies at their lower bound")
    return 1 if bad else 0


if __name__ == "__main__":
    raise SystemExit(main())
