"""Pictures of a cyclic crystal-plasticity result: the FIP map with the top-ranked slip bands, and
the macroscopic hysteresis loop. Every picture carries the model assumptions."""

from __future__ import annotations

import textwrap

import matplotlib.pyplot as plt
import numpy as np

from slipnet.figures._common import SCALAR_CMAP, add_scale_bar, label_map_axes, map_extent

__all__ = ["plot_fip_bands", "plot_hysteresis"]


def _caption(ax, text: str, y: float = -0.16) -> None:
    ax.text(0.5, y, "\n".join(textwrap.wrap(text, 110)), transform=ax.transAxes, ha="center", va="top", fontsize=6,
            color="0.25")


def plot_fip_bands(result, top: int = 10, ax=None):
    """Map the largest Fatemi–Socie FIP per point and outline the ``top`` ranked slip bands.

    Each band is drawn as a line along its slip trace through its centroid, numbered by rank;
    the crack slit (if any) in black, compliant points grey.

    Parameters
    ----------
    result
        A :class:`~slipnet.stress.cyclic.CyclicField`.
    top
        Number of bands to draw.
    ax
        Axes to draw into (a new figure if None).

    Returns
    -------
    matplotlib.figure.Figure
    """
    if ax is None:
        ny, nx = result.shape
        fig, ax = plt.subplots(figsize=(7.0, 5.0 * ny / max(nx, 1) + 1.4))
    else:
        fig = ax.figure
    omap = result.omap
    img = np.ma.masked_where(result.compliant, result.fip)
    cm = plt.get_cmap(SCALAR_CMAP).copy()
    cm.set_bad("0.6")
    ext = map_extent(omap)
    im = ax.imshow(img, extent=ext, origin="upper", cmap=cm, interpolation="nearest")
    if result.crack_mask.any():
        ax.imshow(np.ma.masked_where(~result.crack_mask, np.ones(result.shape)), extent=ext, origin="upper",
                  cmap="gray_r", vmin=0, vmax=1, interpolation="nearest")
    cb = fig.colorbar(im, ax=ax, shrink=0.8)
    cb.set_label("FIP (Fatemi–Socie), largest over systems")
    half = 4.0 * omap.step
    for _, b in result.bands.head(int(top)).iterrows():
        t = np.radians(b["trace_angle_deg"])
        dx, dy = half * np.cos(t), half * np.sin(t)
        ax.plot([b["x_um"] - dx, b["x_um"] + dx], [b["y_um"] - dy, b["y_um"] + dy], color="white", lw=2.2)
        ax.plot([b["x_um"] - dx, b["x_um"] + dx], [b["y_um"] - dy, b["y_um"] + dy], color="crimson", lw=1.0)
        ax.text(b["x_um"] + dx, b["y_um"] + dy, str(int(b["rank"])), color="white", fontsize=7, fontweight="bold")
    ax.set_xlim(ext[0], ext[1])
    ax.set_ylim(ext[2], ext[3])
    label_map_axes(ax)
    add_scale_bar(ax)
    ax.set_title(f"FIP map and the top {min(int(top), len(result.bands))} slip bands", fontsize=10)
    _caption(ax, "Model: " + result.assumptions)
    return fig


def plot_hysteresis(result, ax=None):
    """Macroscopic stress against strain along the load axis, one colour per cycle (MPa, –).

    Returns
    -------
    matplotlib.figure.Figure
    """
    if ax is None:
        fig, ax = plt.subplots(figsize=(6.0, 4.6))
    else:
        fig = ax.figure
    h = result.history
    start = {"strain": 0.0, "stress_mpa": 0.0}
    prev = start
    cmap = plt.get_cmap("viridis")
    last = int(h["cycle"].max()) if len(h) else 0
    for c, part in h.groupby("cycle", sort=True):
        xs = np.concatenate([[prev["strain"]], part["strain"].to_numpy()])
        ys = np.concatenate([[prev["stress_mpa"]], part["stress_mpa"].to_numpy()])
        label = "first loading" if c == 0 else f"cycle {c}"
        ax.plot(xs * 100.0, ys, "-", color=cmap(c / max(last, 1)), lw=1.4, marker=".", ms=3, label=label)
        prev = part.iloc[-1]
    ax.set_xlabel("mean strain along the load axis (%)")
    ax.set_ylabel("applied stress (MPa)")
    ax.axhline(0.0, color="0.7", lw=0.6)
    ax.axvline(0.0, color="0.7", lw=0.6)
    ax.legend(fontsize=8)
    ax.set_title("Macroscopic hysteresis loop", fontsize=10)
    _caption(ax, "Model: " + result.assumptions, y=-0.14)
    return fig
