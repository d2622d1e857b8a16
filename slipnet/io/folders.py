"""Read every orientation map in a folder (batch runs)."""

from __future__ import annotations

import os
from pathlib import Path

from slipnet.errors import ParameterError
from slipnet.io.maps import read_map
from slipnet.maps.orientation_map import OrientationMap

__all__ = ["map_files", "read_map_folder"]


def map_files(folder: str | os.PathLike) -> list[Path]:
    """The map files of ``folder`` (every visible regular file), sorted by name.

    Raises
    ------
    ParameterError
        If the folder does not exist or holds no file.
    """
    src = Path(folder)
    if not src.is_dir():
        raise ParameterError(f"batch folder {src} does not exist; give a folder of specimen maps")
    files = sorted(f for f in src.iterdir() if f.is_file() and not f.name.startswith("."))
    if not files:
        raise ParameterError(f"batch folder {src} holds no map files")
    return files


def read_map_folder(folder: str | os.PathLike, **read_options) -> list[tuple[Path, OrientationMap]]:
    """Read every map of ``folder`` (:func:`map_files`) with :func:`slipnet.io.read_map`.

    Every map is read before any is returned, so one bad file stops the batch with its name.
    """
    return [(f, read_map(f, **read_options)) for f in map_files(folder)]
