"""Writing a :class:`~slipnet.grains.GrainGraph` to files: CSV tables, GraphML, label image, pictures, summary.

The :class:`~slipnet.grains.GrainGraph` ``write_*`` methods and :func:`slipnet.grains.write_grain_outputs`
delegate here (all re-exported from :mod:`slipnet.grains`).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import TYPE_CHECKING

import networkx as nx
import numpy as np

from ._files import atomic_path

if TYPE_CHECKING:
    from .grains import GrainGraph

__all__ = ["write_grain_outputs", "write_graphml", "write_labels", "write_tables"]


def write_graphml(gg: GrainGraph, path: str | os.PathLike) -> Path:
    """Write ``gg.graph`` as GraphML (atomically); returns the path."""
    path = Path(path)
    with atomic_path(path) as tmp:
        nx.write_graphml(gg.graph, tmp)
    return path

def write_labels(gg: GrainGraph, path: str | os.PathLike) -> Path:
    """Write the label image as a NumPy ``.npy`` file (atomically); returns the path."""
    path = Path(path)
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.save(fh, gg.labels)
    return path

def write_tables(gg: GrainGraph, folder: str | os.PathLike) -> dict[str, Path]:
    """Write the grain, boundary, triple-junction (and sub-grain boundary) tables as CSV."""
    from .report import write_table

    folder = Path(folder)
    out = {
        "grains": write_table(gg.grains, folder / "grains.csv"),
        "boundaries": write_table(gg.boundaries, folder / "boundaries.csv"),
        "triple_junctions": write_table(gg.triple_junctions, folder / "triple_junctions.csv"),
    }
    if gg.subgrain_boundaries is not None:
        out["subgrain_boundaries"] = write_table(gg.subgrain_boundaries, folder / "subgrain_boundaries.csv")
    return out


def write_grain_outputs(gg: GrainGraph, folder: str | os.PathLike, *, figures: bool = True,
                        progress: bool = False) -> list[Path]:
    """Write tables (CSV), graph (GraphML), label image (``.npy``), pictures and a summary into ``folder``.

    Returns the paths written. The summary carries the caution text.
    """
    from .grains import _Steps  # lazy: slipnet.grains imports this module
    from .report import write_summary

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    jobs = ["tables", "graph", "labels"] + (["grain map", "histogram"] if figures else [])
    bar = _Steps(len(jobs), progress)
    paths = list(gg.write_tables(folder).values())
    bar("tables")
    paths.append(gg.write_graphml(folder / "grain_graph.graphml"))
    bar("graph")
    paths.append(gg.write_labels(folder / "grain_labels.npy"))
    bar("labels")
    if figures:
        from .figures._common import save_figure
        from .figures.grains import plot_grain_map, plot_misorientation_histogram

        fig = plot_grain_map(gg)
        save_figure(fig, folder / "grain_map.png")
        paths.append(folder / "grain_map.png")
        bar("grain map")
        fig = plot_misorientation_histogram(gg)
        save_figure(fig, folder / "misorientation_histogram.png")
        paths.append(folder / "misorientation_histogram.png")
        bar("histogram")
    bar.close()
    cls = gg.boundaries["boundary_class"].value_counts()
    lines = [
        f"Map: {gg.omap.name or '(unnamed)'}, {gg.omap.grid} grid {gg.omap.shape[0]} x {gg.omap.shape[1]}, "
        f"step {gg.omap.step:g} µm.",
        f"Threshold {gg.settings['threshold_deg']:g}°; {gg.n_grains} grains, {len(gg.boundaries)} boundaries, "
        f"{len(gg.triple_junctions)} triple junctions.",
        "",
        "Boundary classes (count): " + ", ".join(f"{k} {v}" for k, v in cls.items()),
        "",
        "Steps:",
        *(f"- {line}" for line in gg.log),
        "",
        "Files: " + ", ".join(p.name for p in paths),
    ]
    paths.append(write_summary(folder, "Grains and boundaries", lines))
    return paths
