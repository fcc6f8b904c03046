"""Build the API reference from the docstrings with pdoc; fail on any pdoc warning.

Usage: python scripts/build_api_docs.py [OUTPUT_DIR]   (default: site/api)
pdoc reports unimportable modules and unresolvable cross-references as warnings; this script
turns each into a failure, so a broken reference cannot land silently.
"""

from __future__ import annotations

import importlib
import pkgutil
import sys
import warnings
from pathlib import Path

import pdoc

SUBPACKAGES = ("shortcut_gym.envs", "shortcut_gym.agents", "shortcut_gym.lab")


def module_names() -> list[str]:
    """The root package and the modules of subpackages whose __all__ lists names only

    (pdoc follows ``__all__``, so it would skip those modules; it finds the others itself).
    """
    names = ["shortcut_gym"]  # its __all__ brings in the subpackages
    for pkg in SUBPACKAGES:
        mod = importlib.import_module(pkg)
        if hasattr(mod, "__all__"):
            names += [f"{pkg}.{m.name}" for m in pkgutil.iter_modules(mod.__path__) if not m.name.startswith("_")]
    return names


def build(output: Path) -> list[str]:
    """Render every module of ``shortcut_gym`` into ``output``; return pdoc's warnings."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pdoc.render.configure(docformat="restructuredtext", search=True, show_source=False)
        pdoc.pdoc(*module_names(), output_directory=output)
    return [str(w.message) for w in caught if "pdoc" in (w.filename or "") or issubclass(w.category, UserWarning)]


def main() -> int:
    output = Path(sys.argv[1]) if len(sys.argv) > 1 else Path("site/api")
    problems = build(output)
    for p in problems:
        print(f"pdoc warning: {p}", file=sys.stderr)
    pages = sorted(output.rglob("*.html"))
    print(f"API reference: {len(pages)} pages in {output}")
    return 1 if problems or not pages else 0


if __name__ == "__main__":
    raise SystemExit(main())
