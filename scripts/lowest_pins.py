"""Print pip pins (``name==floor``) of the direct dependencies' lower bounds in pyproject.toml.

``make test-lowest`` installs the project with these as constraints into a fresh venv, so the
declared floors are the versions actually tested. torch is left out (the Makefile installs the
machine's CPU wheel first: older CPU builds are not on PyPI, only CUDA builds).

Usage: ``python scripts/lowest_pins.py [--extra NAME ...]``
"""

from __future__ import annotations

import argparse
import re
import sys
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
#: Dependencies not pinned to their floor (see the module docstring).
NOT_PINNED = {"torch"}

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
    args = parser.parse_args(argv)
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    reqs = list(project["dependencies"])
    for extra in args.extra:
        reqs += project["optional-dependencies"][extra]
    sys.stdout.write("\n".join(floor_pins(reqs)) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
