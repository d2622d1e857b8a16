"""Rebuild grains and boundaries of a map as a graph, and ask it questions.

An orientation map is a grid of crystal orientations; fatigue-crack reasoning needs grains and the
boundaries between them. This script takes the invented demo specimen (synthetic data), joins
neighbouring points below 15° into grains, and prints what the grain graph knows: the largest
grains, the boundary classes (low-angle, CSL Σ3…Σ29 by the Brandon criterion, high-angle), the
boundary between the grain at the notch root and its longest-bordered neighbour, the grains a
straight line ahead of the notch crosses, and the grains within 30 µm of the root. It writes the
tables, the GraphML graph, the label image and two pictures into a temporary folder. The same run
on a file is ``slipnet grains MAP --out FOLDER``.
"""

from __future__ import annotations

import tempfile

import numpy as np

from slipnet.grains import build_grain_graph
from slipnet.reports import write_grains
from slipnet.synthetic import demo_specimen


def main() -> None:
    spec = demo_specimen(seed=7, quick=True)
    gg = build_grain_graph(spec.omap, 15.0, subgrain_deg=2.0, min_grain_size=4)
    for line in gg.log:
        print("  " + line)

    cols = ["grain", "area_um2", "ecd_um", "aspect_ratio", "gos_deg", "touches_edge"]
    print(gg.grains.sort_values("area_um2", ascending=False)[cols].head(5).round(2).to_string(index=False))
    print(gg.boundaries.groupby("boundary_class")["length_um"].agg(["count", "sum"]).round(1))

    x0, y0 = spec.notch_root
    g = gg.grain_at(x0, y0)
    if g < 0:  # the root lies in the notch itself: step into the material
        d = np.asarray(spec.notch_direction)
        g = gg.grain_at(x0 + 2 * gg.omap.step * d[0], y0 + 2 * gg.omap.step * d[1])
    nbrs = gg.neighbours(g)
    longest = max(nbrs, key=lambda n: gg.graph.edges[g, n]["length_um"])
    b = gg.boundary(g, longest)
    print(f"grain {g} at the notch root has {len(nbrs)} neighbours; its longest boundary (with grain {longest}) "
          f"is {b['length_um']:.0f} µm long, {b['misorientation_deg']:.1f}° ({b['boundary_class']}), "
          f"trace at {b['trace_angle_deg']:.0f}°")

    end = (x0 + 200.0 * spec.notch_direction[0], y0 + 200.0 * spec.notch_direction[1])
    for grain, s_in, s_out in gg.grains_on_segment((x0, y0), end):
        print(f"  ahead of the notch: grain {grain:4d} from {s_in:6.1f} to {s_out:6.1f} µm")
    print(f"grains within 30 µm of the root: {gg.grains_within(x0, y0, 30.0)}")

    with tempfile.TemporaryDirectory() as tmp:
        files = write_grains(gg, tmp)
        print("wrote " + ", ".join(p.name for p in files.values()))


if __name__ == "__main__":
    main()
