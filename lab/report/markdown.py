"""Markdown and table files of report folders: pipe tables, ``index.md``, CSV tables."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd


def write_table(table: pd.DataFrame, folder: Path, name: str, index: bool = False) -> Path:
    """``folder/name.csv``."""
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name}.csv"
    table.to_csv(path, index=index)
    return path


def markdown_table(table: pd.DataFrame, index: bool = False, digits: int = 2) -> str:
    """A pipe table of ``table``: floats to ``digits`` decimals (index values, e.g. swept settings, in
    full), NaN as a dash, numbers right-aligned."""
    n_index = table.index.nlevels if index else 0
    df = table.reset_index() if index else table

    def cell(v: object, is_index: bool) -> str:
        if isinstance(v, (float, np.floating)):
            return "-" if np.isnan(v) else (f"{v:g}" if is_index else f"{v:.{digits}f}")
        return str(v).replace("|", "\\|")

    numeric = [pd.api.types.is_numeric_dtype(df[c]) for c in df.columns]
    head = "| " + " | ".join(str(c) for c in df.columns) + " |"
    rule = "|" + "|".join("---:" if n else "---" for n in numeric) + "|"
    rows = ["| " + " | ".join(cell(v, i < n_index) for i, v in enumerate(row)) + " |"
            for row in df.itertuples(index=False)]
    return "\n".join([head, rule, *rows])


def index_markdown(folder: Path, entries: Sequence[tuple[Path, str]], title: str,
                   sections: Sequence[tuple[str, str]] | None = None, intro: str = "") -> str:
    """A folder's ``index.md`` text: the title, ``intro``, the findings (``sections``: heading and
    Markdown body each), then one line per written file (paths relative to ``folder``)."""
    lines = [f"# {title}", ""]
    if intro:
        lines += [intro.strip(), ""]
    for heading, body in sections or []:
        lines += [f"## {heading}", "", body.strip(), ""]
    if sections:
        lines += ["## Files", ""]
    for p, what in entries:
        lines.append(f"- `{Path(p).relative_to(folder).as_posix()}`: {what}")
    return "\n".join(lines) + "\n"


def write_index(folder: Path, entries: Sequence[tuple[Path, str]], title: str,
                sections: Sequence[tuple[str, str]] | None = None) -> Path:
    """Write :func:`index_markdown` to ``folder/index.md``; returns the path."""
    path = folder / "index.md"
    path.write_text(index_markdown(folder, entries, title, sections))
    return path
