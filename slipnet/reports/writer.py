"""The one writer every report uses: tables, settings, arrays, pictures and a summary, atomically.

Every step's writer (``slipnet.reports.<step>``) collects its files through an :class:`Outputs`
and returns ``Outputs.files``: a ``{name: Path}`` dict, the one return shape of every writer.
Each file is written to a temporary name beside its target and renamed when complete
(:func:`slipnet._files.atomic_path`), so an interrupted run never leaves a half-written file,
and every summary ends with the caution (:data:`slipnet.cautions.CAUTION`). Inside a
:class:`slipnet.runs.OutputRun` every file is also checked against the run's inputs, kept for a
roll-back and listed in the run's manifest; a full disk or a read-only folder raises
:class:`~slipnet.errors.OutputError`.
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet._files import atomic_path
from slipnet.cautions import CAUTION

__all__ = ["Outputs", "json_default", "markdown_table", "write_json", "write_summary", "write_table"]


def json_default(value):
    """JSON encoder fallback for numpy scalars and arrays, paths and sets (used by every writer)."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (set, frozenset, tuple)):
        return list(value)
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    return str(value)


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


def write_json(data, path: str | os.PathLike) -> Path:
    """Write ``data`` as indented JSON (numpy values converted), atomically."""
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_text(json.dumps(data, indent=1, default=json_default), encoding="utf-8")
    return path


class Outputs:
    """Files written into one output folder, by name.

    Examples
    --------
    >>> import tempfile, pandas as pd
    >>> out = Outputs(tempfile.mkdtemp())
    >>> _ = out.table("grains", pd.DataFrame({"grain": [0, 1]}), "grains.csv")
    >>> _ = out.summary("A run", ["two grains"])
    >>> sorted(out.files)
    ['grains', 'summary']
    """

    def __init__(self, folder: str | os.PathLike) -> None:
        # the folder is made by the first file written into it: a run that fails first leaves nothing
        self.folder = Path(folder)
        self.files: dict[str, Path] = {}

    def _keep(self, name: str, path: Path) -> Path:
        self.files[name] = path
        return path

    def table(self, name: str, table: pd.DataFrame, filename: str) -> Path:
        """A CSV table (``.csv``) or JSON records (``.json``)."""
        return self._keep(name, write_table(table, self.folder / filename))

    def json(self, name: str, data, filename: str) -> Path:
        """Settings or other plain data as JSON."""
        return self._keep(name, write_json(data, self.folder / filename))

    def text(self, name: str, text: str, filename: str) -> Path:
        """A UTF-8 text file."""
        path = self.folder / filename
        with atomic_path(path) as tmp:
            tmp.write_text(text, encoding="utf-8")
        return self._keep(name, path)

    def array(self, name: str, values: np.ndarray, filename: str) -> Path:
        """A NumPy ``.npy`` array (never pickled)."""
        path = self.folder / filename
        with atomic_path(path) as tmp, open(tmp, "wb") as fh:
            np.save(fh, np.asarray(values), allow_pickle=False)
        return self._keep(name, path)

    def figure(self, name: str, fig, filename: str, *, dpi: int = 150) -> Path:
        """A matplotlib figure (closed after saving)."""
        import matplotlib.pyplot as plt

        path = self.folder / filename
        fmt = path.suffix.lstrip(".") or "png"
        with atomic_path(path) as tmp:
            fig.savefig(tmp, dpi=dpi, bbox_inches="tight", format=fmt)
        plt.close(fig)
        return self._keep(name, path)

    def file(self, name: str, path: str | os.PathLike) -> Path:
        """Record a file written by another helper (which must itself write atomically)."""
        return self._keep(name, Path(path))

    def summary(self, title: str, lines: Iterable[str], *, filename: str = "summary.md") -> Path:
        """The folder's Markdown summary, ending with the caution."""
        return self._keep("summary", write_summary(self.folder, title, lines, name=filename))


def markdown_table(table: pd.DataFrame, *, digits: int = 4) -> str:
    """A DataFrame as a plain Markdown (pipe) table, numbers to ``digits`` significant digits.

    Examples
    --------
    >>> print(markdown_table(pd.DataFrame({"rank": [1], "x_um": [12.3456]})))
    | rank | x_um |
    | --- | --- |
    | 1 | 12.35 |
    """
    def cell(v) -> str:
        if isinstance(v, (float, np.floating)):
            return f"{float(v):.{digits}g}"
        return str(v).replace("|", "\\|")

    head = "| " + " | ".join(map(str, table.columns)) + " |"
    rule = "| " + " | ".join("---" for _ in table.columns) + " |"
    rows = ["| " + " | ".join(cell(v) for v in row) + " |" for row in table.itertuples(index=False)]
    return "\n".join([head, rule, *rows])
