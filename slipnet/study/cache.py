"""Content-addressed cache of the study's steps, and the step log.

Each step's key is the sha256 of the slipnet version, the step's name and options, and the keys
of the steps it reads (the first step hashes the bytes of the map file instead). Equal keys mean
equal inputs, so the stored result is reused; any changed input or option changes the key of that
step and of every step after it, and only those are computed again. Results are stored under
``<out>/.cache/<step>-<key>.npz`` in the safe format of :mod:`slipnet.study.store` (grain graphs
in :func:`slipnet.io.write_grain_graph`'s format); older entries of a step are removed once its
new result is stored.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from slipnet import __version__
from slipnet.errors import InputFileError
from slipnet.io.graph import read_grain_graph, write_grain_graph
from slipnet.maps.grain_graph import GrainGraph
from slipnet.reports.writer import json_default
from slipnet.study.store import STORE_FORMAT, load_object, save_object

__all__ = ["StepCache", "StepRecord", "file_digest", "step_key"]


def file_digest(path: str | os.PathLike) -> str:
    """sha256 of a file's bytes (hex).

    Raises
    ------
    InputFileError
        If the file cannot be read.
    """
    h = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
    except OSError as err:
        raise InputFileError(f"cannot read the file ({err.strerror}); check the path", path=str(path)) from err
    return h.hexdigest()


def step_key(step: str, options, parents: tuple[str, ...] = ()) -> str:
    """The cache key of a step: sha256 of the version, the step, its options and its parents' keys."""
    doc = json.dumps({"slipnet": __version__, "store": STORE_FORMAT, "step": step, "options": options,
                      "parents": list(parents)}, sort_keys=True, default=json_default)
    return hashlib.sha256(doc.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class StepRecord:
    """One line of the step log: the step, whether it was ``computed`` or ``reused``, seconds, key."""

    step: str
    status: str
    seconds: float
    key: str


class StepCache:
    """Stored step results under ``folder`` (None: nothing stored, every step computed).

    Parameters
    ----------
    folder
        The cache folder, usually ``<out>/.cache``.
    """

    def __init__(self, folder: str | os.PathLike | None) -> None:
        self.folder = None if folder is None else Path(folder)
        self.log: list[StepRecord] = []

    def _path(self, step: str, key: str) -> Path:
        return self.folder / f"{step}-{key[:24]}.npz"

    def run(self, step: str, key: str, compute: Callable[[], object]):
        """The stored result of ``step`` under ``key``, or ``compute()`` stored under it; logged."""
        t0 = time.perf_counter()
        if self.folder is not None:
            path = self._path(step, key)
            if path.is_file():
                try:
                    value = read_grain_graph(path) if step == "grains" else load_object(path)
                except InputFileError:
                    path.unlink()  # a damaged entry is computed again
                else:
                    self.log.append(StepRecord(step, "reused", time.perf_counter() - t0, key))
                    return value
        value = compute()
        if self.folder is not None:
            path = self._path(step, key)
            if isinstance(value, GrainGraph):
                write_grain_graph(value, path)
            else:
                save_object(value, path)
            for old in self.folder.glob(f"{step}-*.npz"):
                if old != path and old.name[len(step) + 1:-4].isalnum():
                    old.unlink()
        self.log.append(StepRecord(step, "computed", time.perf_counter() - t0, key))
        return value

    def table(self) -> pd.DataFrame:
        """The step log as a table: ``step``, ``status``, ``seconds``, ``key``."""
        return pd.DataFrame([{"step": r.step, "status": r.status, "seconds": round(r.seconds, 3),
                              "key": r.key[:16]} for r in self.log], columns=["step", "status", "seconds", "key"])
