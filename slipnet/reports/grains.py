"""Write a :class:`~slipnet.maps.GrainGraph`: CSV tables, GraphML, label image, pictures, summary."""

from __future__ import annotations

import os
from pathlib import Path

import networkx as nx

from slipnet._files import atomic_path
from slipnet._progress import StepProgress
from slipnet.figures.grains import plot_grain_map, plot_misorientation_histogram
from slipnet.maps.grain_graph import GrainGraph
from slipnet.reports.writer import Outputs

__all__ = ["write_grains", "write_graphml"]


def write_graphml(graph: nx.Graph, path: str | os.PathLike) -> Path:
    """Write a networkx graph as GraphML (atomically); returns the path."""
    path = Path(path)
    with atomic_path(path) as tmp:
        nx.write_graphml(graph, tmp)
    return path


def write_grains(gg: GrainGraph, folder: str | os.PathLike, *, figures: bool = True,
                 progress: bool = False) -> dict[str, Path]:
    """Write tables (CSV), graph (GraphML), label image (``.npy``), pictures and a summary into ``folder``.

    Returns
    -------
    dict
        Name → path of every file written. The summary carries the caution text.
    """
    out = Outputs(folder)
    jobs = ["tables", "graph", "labels"] + (["grain map", "histogram"] if figures else [])
    bar = StepProgress(len(jobs), progress, "grain files")
    out.table("grains", gg.grains, "grains.csv")
    out.table("boundaries", gg.boundaries, "boundaries.csv")
    out.table("triple_junctions", gg.triple_junctions, "triple_junctions.csv")
    if gg.subgrain_boundaries is not None:
        out.table("subgrain_boundaries", gg.subgrain_boundaries, "subgrain_boundaries.csv")
    bar("tables")
    out.file("graph", write_graphml(gg.graph, out.folder / "grain_graph.graphml"))
    bar("graph")
    out.array("labels", gg.labels, "grain_labels.npy")
    bar("labels")
    if figures:
        out.figure("grain_map", plot_grain_map(gg), "grain_map.png")
        bar("grain map")
        out.figure("misorientation_histogram", plot_misorientation_histogram(gg), "misorientation_histogram.png")
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
        "Files: " + ", ".join(p.name for p in out.files.values()),
    ]
    out.summary("Grains and boundaries", lines)
    return out.files
