"""Build a synthetic specimen with known grains and look at it in IPF colours.

``make_specimen`` invents an orientation map: a power tessellation of grains with a chosen mean
equivalent circle diameter, a texture (here a γ fibre, crystal ⟨111⟩ along the specimen normal
with 12° spread), a lattice bend of a few degrees inside each grain, 0.5° measurement noise,
isolated and clustered unindexed points, and a V-notch cut into the top edge. The ground truth
(grain of every point, grain orientations, notch root and direction) comes with it, which is what
tests and benchmarks of grain reconstruction compare against. The script prints the truth next to
what the map shows and writes the map in IPF colours for the normal direction and for x.

Run: ``python examples/specimens/make_specimen.py [OUTPUT_FOLDER]``
"""

from __future__ import annotations

import math
import sys
import tempfile
from pathlib import Path

import numpy as np

from slipnet.crystal import quat_rotate
from slipnet.figures.maps import plot_ipf_map
from slipnet.maps import NotchShape
from slipnet.synthetic import make_specimen


def main(out: str | Path | None = None) -> list[Path]:
    """Build the specimen, print its truth and write two pictures into ``out`` (a temporary folder if None)."""
    spec = make_specimen(
        (240, 320), 1.0, grid="hex", grain_size_um=25.0, texture="fibre", fibre_axis=(0, 0, 1),
        fibre_hkl=(1, 1, 1), fibre_spread_deg=12.0, gradient_deg=3.0, noise_deg=0.5,
        unindexed_fraction=0.02, notch=NotchShape(depth_um=50.0, root_radius_um=6.0, opening_deg=60.0),
        notch_side="top",
        seed=4, name="fibre-textured example",
    )
    om, lab = spec.omap, spec.truth_labels
    area = np.bincount(lab[lab >= 0], minlength=spec.n_grains) * om.point_area
    ecd = np.sqrt(4.0 * area / math.pi)
    normal_in_crystal = quat_rotate(spec.grain_quats, np.broadcast_to([0.0, 0.0, 1.0], (spec.n_grains, 3)))
    tilt = np.degrees(np.arccos(np.clip(np.abs(normal_in_crystal).sum(axis=1) / math.sqrt(3.0), -1.0, 1.0)))
    print(f"{spec.name}: {om.shape[0]} × {om.shape[1]} points, {om.grid} grid, step {om.step:g} µm")
    print(f"grains in the truth: {spec.n_grains}; mean ECD {ecd.mean():.1f} µm (edge-cut grains included)")
    print(f"unindexed points: {100 * (~om.indexed).mean():.1f} % (notch and 2 % scattered)")
    print(f"grain ⟨111⟩ to normal: RMS {np.sqrt(np.mean(tilt**2)):.1f}° (requested spread 12°)")
    print(f"notch root at ({spec.notch_root[0]:.1f}, {spec.notch_root[1]:.1f}) µm, pointing {spec.notch_direction}, "
          f"load axis {spec.load_axis}")
    folder = Path(out) if out is not None else Path(tempfile.mkdtemp(prefix="slipnet-example-"))
    written = []
    for name, direction in (("ipf_normal.png", (0, 0, 1)), ("ipf_x.png", (1, 0, 0))):
        ax = plot_ipf_map(om, direction=direction, labels=lab)
        ax.plot(*spec.notch_root, marker="o", mfc="white", mec="black", ls="none")
        ax.figure.savefig(folder / name, dpi=150, bbox_inches="tight")
        written.append(folder / name)
    print("pictures:", ", ".join(str(p) for p in written))
    return written


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else None)
