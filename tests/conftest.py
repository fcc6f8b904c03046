"""Hypothesis profiles: the suite is reproducible by default; ``explore`` searches wider.

``default`` derandomizes, so CI and every developer run the same examples (a failure is never
a matter of luck). Run ``pytest --hypothesis-profile=explore --hypothesis-seed=N`` for several N
to draw fresh random examples when changing numerical code.
"""

from __future__ import annotations

from hypothesis import settings

settings.register_profile("default", derandomize=True, deadline=None)
settings.register_profile("explore", derandomize=False, deadline=None)
settings.load_profile("default")

# The benchmark suites live in scripts/benchmarks/ (outside the package); tests that import them
# directly must not depend on another test having put scripts/ on the path first.
import sys  # noqa: E402
from pathlib import Path  # noqa: E402

_SCRIPTS = str(Path(__file__).resolve().parents[1] / "scripts")
if _SCRIPTS not in sys.path:
    sys.path.insert(0, _SCRIPTS)
