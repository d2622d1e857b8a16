"""Shared figure helpers: map extents, scale bars, saving."""

from __future__ import annotations

import math
import os

import matplotlib

matplotlib.use("Agg", force=False)
import matplotlib.pyplot as plt
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from slipnet._files import atomic_path

#: Colour maps for scalar data: perceptually uniform and colour-blind safe.
SCALAR_CMAP = "viridis"
DIVERGING_CMAP = "PuOr"


def map_extent(omap) -> tuple[float, float, float, float]:
    """``imshow`` extent (left, right, bottom, top) in µm so pixels centre on the map points.

    y grows downwards (row index), as in the map frame; use with ``origin="upper"``.
    """
    return omap.pixel_extent()


def nice_length(span: float) -> float:
    """A round scale-bar length (1, 2 or 5 × 10ⁿ µm) near a fifth of ``span``."""
    target = max(span / 5.0, 1e-9)
    exp = math.floor(math.log10(target))
    for m in (5, 2, 1):
        if m * 10**exp <= target:
            return m * 10**exp
    return 10**exp


def add_scale_bar(ax: Axes, span_um: float | None = None, *, color: str = "white") -> None:
    """Draw a labelled scale bar in the lower-left corner of a map axis (data units are µm)."""
    x0, x1 = sorted(ax.get_xlim())
    y0, y1 = sorted(ax.get_ylim())
    length = nice_length(span_um if span_um is not None else x1 - x0)
    bx = x0 + 0.04 * (x1 - x0)
    inverted = ax.yaxis_inverted()
    by = (y1 - 0.06 * (y1 - y0)) if inverted else (y0 + 0.06 * (y1 - y0))
    ax.plot([bx, bx + length], [by, by], color=color, lw=4, solid_capstyle="butt")
    ax.plot([bx, bx + length], [by, by], color="black", lw=1, solid_capstyle="butt")
    label = f"{length:g} µm"
    ty = by - 0.03 * (y1 - y0) if inverted else by + 0.03 * (y1 - y0)
    ax.text(bx + 0.5 * length, ty, label, color=color, ha="center", va="bottom" if inverted else "top",
            fontsize=9, fontweight="bold",
            bbox={"facecolor": "black", "alpha": 0.4, "pad": 1, "edgecolor": "none"})


def label_map_axes(ax: Axes) -> None:
    """Axis labels for a map in the slipnet frame."""
    ax.set_xlabel("x (µm)")
    ax.set_ylabel("y (µm)")
    ax.set_aspect("equal")


def save_figure(fig: Figure, path: str | os.PathLike, *, dpi: int = 150) -> None:
    """Save ``fig`` atomically (temporary name, then rename) and close it."""
    suffix = os.path.splitext(str(path))[1].lstrip(".") or "png"
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=dpi, bbox_inches="tight", format=suffix)
    plt.close(fig)
