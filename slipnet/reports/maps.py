"""Write an orientation map: the map files and an inverse pole figure picture."""

from __future__ import annotations

import os
from pathlib import Path

from slipnet.figures.maps import plot_ipf_map
from slipnet.io.maps import write_map
from slipnet.maps.orientation_map import OrientationMap
from slipnet.reports.writer import Outputs

__all__ = ["write_map_files"]


def write_map_files(omap: OrientationMap, folder: str | os.PathLike, *, stem: str = "specimen", notch_root=None,
                    title: str | None = None, figures: bool = True) -> dict[str, Path]:
    """Write ``<stem>.txt`` (text table), ``<stem>.npz`` (bundle) and ``ipf_map.png`` into ``folder``.

    Parameters
    ----------
    omap
        The map.
    folder
        Output folder.
    stem
        File name stem of the map files.
    notch_root : (2,) or None
        Marked on the picture, µm.
    title
        Picture title (default: the map name).
    figures
        Draw the IPF picture.

    Returns
    -------
    dict
        ``text``, ``bundle`` and ``ipf_map`` paths.
    """
    out = Outputs(folder)
    out.file("text", write_map(omap, out.folder / f"{stem}.txt"))
    out.file("bundle", write_map(omap, out.folder / f"{stem}.npz"))
    if figures:
        ax = plot_ipf_map(omap, direction=(0.0, 0.0, 1.0),
                          title=title or f"{omap.name or 'map'}: IPF colouring, normal direction z")
        if notch_root is not None:
            ax.plot(*notch_root, marker="o", ms=7, mfc="white", mec="black", ls="none", label="notch root")
            ax.legend(loc="lower right", fontsize=8, framealpha=0.8)
        out.figure("ipf_map", ax.figure, "ipf_map.png")
    return out.files
