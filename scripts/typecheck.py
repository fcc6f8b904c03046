"""Type-check the package with mypy (run by ``make test``).

The import package ``shortcut_gym`` is assembled from the project's top-level folders by
setuptools' ``package-dir`` mapping, which mypy cannot follow; this script links the folders into
the package's shape in a temporary directory and checks that. Paths in the messages are given
back relative to the project folder. Usage: python scripts/typecheck.py
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def link_tree(dest: Path) -> dict[str, str]:
    """Symlink the package folders under ``dest/shortcut_gym``; returns linked prefix -> project prefix."""
    mapping = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["package-dir"]
    pkg = dest / "shortcut_gym"
    pkg.mkdir()
    back = {}
    for name, folder in mapping.items():
        if name == "shortcut_gym":
            for f in (ROOT / folder).iterdir():
                (pkg / f.name).symlink_to(f)
            back["shortcut_gym/__"] = f"{folder}/__"
            continue
        sub = name.split(".", 1)[1]
        (pkg / sub).symlink_to(ROOT / folder, target_is_directory=True)
        back[f"shortcut_gym/{sub}/"] = f"{folder}/"
    return back


def main() -> int:
    with tempfile.TemporaryDirectory() as tmp:
        back = link_tree(Path(tmp))
        res = subprocess.run([sys.executable, "-m", "mypy", "--config-file", str(ROOT / "pyproject.toml"),
                              "-p", "shortcut_gym"], cwd=tmp, capture_output=True, text=True)
    for line in (res.stdout + res.stderr).splitlines():
        for linked, real in back.items():
            if line.startswith(linked):
                line = real + line[len(linked):]
                break
        print(line)
    return res.returncode


if __name__ == "__main__":
    raise SystemExit(main())
