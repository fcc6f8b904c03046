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
    """The root package and every module and package below the subpackages, listed explicitly

    (pdoc follows ``__all__`` where a package defines one, so it would skip unlisted modules).
    """
    names = ["shortcut_gym"]
    for pkg in SUBPACKAGES:
        mod = importlib.import_module(pkg)
        names.append(pkg)
        names += [m.name for m in pkgutil.walk_packages(mod.__path__, prefix=f"{pkg}.")
                  if not m.name.rsplit(".", 1)[-1].startswith("_")]
    return names


def build(output: Path) -> list[str]:
    """Render every module of ``shortcut_gym`` into ``output``; return pdoc's warnings."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pdoc.render.configure(docformat="restructuredtext", search=True, show_source=False)
        pdoc.pdoc(*module_names(), output_directory=output)
    # pdoc also walks packages itself, so modules listed explicitly are seen twice: not a problem
    return [str(w.message) for w in caught
            if ("pdoc" in (w.filename or "") or issubclass(w.category, UserWarning))
            and "but a module with this name has already been added" not in str(w.message)
            # pdoc cannot place fields a TypedDict inherits, nor resolve a NamedTuple's string
            # annotations under ``from __future__ import annotations``: the pages still render both
            and "Cannot determine where shortcut_gym.envs.info." not in str(w.message)
            and not ("Error parsing type annotation ForwardRef('np." in str(w.message)
                     and ".__init__." in str(w.message))]


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
