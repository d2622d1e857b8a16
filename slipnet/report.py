"""Plain-text run summaries written beside every set of outputs, always carrying the caution."""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

import pandas as pd

from ._files import atomic_path
from .cautions import CAUTION


def write_summary(folder: str | os.PathLike, title: str, lines: Iterable[str], *, name: str = "summary.md") -> Path:
    """Write ``folder/name`` as Markdown: a title, the given lines, then the caution.

    Returns the path written.
    """
    path = Path(folder) / name
    body = [f"# {title}", "", *lines, "", "## Caution", "", CAUTION, ""]
    with atomic_path(path) as tmp:
        tmp.write_text("\n".join(body), encoding="utf-8")
    return path


def write_table(table: pd.DataFrame, path: str | os.PathLike) -> Path:
    """Write a DataFrame as CSV (or JSON records if the suffix is ``.json``), atomically."""
    path = Path(path)
    with atomic_path(path) as tmp:
        if path.suffix.lower() == ".json":
            tmp.write_text(table.to_json(orient="records", indent=1), encoding="utf-8")
        else:
            table.to_csv(tmp, index=False)
    return path
