"""Pictures of the short-crack growth prediction: rate against crack length, length against cycles,
and the rate along the path drawn on the grain map."""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.axes import Axes
from matplotlib.collections import LineCollection
from matplotlib.colors import Normalize
from matplotlib.figure import Figure

from slipnet.errors import ParameterError
from slipnet.figures._common import SCALAR_CMAP, add_scale_bar, label_map_axes, map_extent
from slipnet.labels import boundary_label

__all__ = [
    "plot_crack_length",
    "plot_growth_on_map",
    "plot_growth_rate",
]

_BARRIER_COLOUR = "0.45"
_ARREST_COLOUR = "#b2182b"  # kept apart from the viridis/cividis range and marked by shape too


def _axes(ax: Axes | None, size=(7.0, 4.2)) -> tuple[Figure, Axes]:
    if ax is None:
        fig, ax = plt.subplots(figsize=size)
        return fig, ax
    return ax.figure, ax


def _barrier_name(row) -> str:
    # the boundary's own identifier, as in every table and the study report; the barrier's order on the
    # path only where the path carries no boundary id
    bid = row.get("boundary_id", -1)
    return boundary_label(bid) if bid is not None and np.isfinite(bid) and bid >= 0 else f"#{int(row['barrier']) + 1}"


def plot_growth_rate(result, ax: Axes | None = None, *, label_barriers: bool = True) -> Figure:
    """da/dN (µm/cycle) against crack length (µm) on log axes, barriers and crossings marked.

    Parameters
    ----------
    result
        A :class:`slipnet.growth.GrowthResult`.
    ax
        Axes to draw into (a new figure when None).
    label_barriers
        Write "B1", "B2", ... beside the barrier lines (numbered from the path start).
    """
    fig, ax = _axes(ax)
    prof = result.profile
    a = prof["crack_length_um"].to_numpy(float)
    r = prof["dadn_um_per_cycle"].to_numpy(float)
    ok = r > 0
    if result.bands is not None:
        b = result.bands
        lo, hi = b["dadn_um_per_cycle_p05"].to_numpy(float), b["dadn_um_per_cycle_p95"].to_numpy(float)
        good = (lo > 0) & (hi > 0)
        ax.fill_between(b["crack_length_um"][good], lo[good], hi[good], color=plt.get_cmap(SCALAR_CMAP)(0.35),
                        alpha=0.25, lw=0, label="5–95 % band")
    ax.plot(a[ok], r[ok], color=plt.get_cmap(SCALAR_CMAP)(0.15), lw=1.6, label="predicted da/dN (µm/cycle)")
    ax.set_xscale("log")
    ax.set_yscale("log")
    bars = result.barriers
    a_max = a.max()
    for _, row in bars.iterrows():  # per barrier: tens at most
        d = row["position_um"]
        if d > a_max or d < a.min():
            continue
        ax.axvline(d, color=_BARRIER_COLOUR, ls="--", lw=0.8)
        if label_barriers:
            ax.annotate(_barrier_name(row), (d, 1.0), xycoords=("data", "axes fraction"),
                        xytext=(2, -10), textcoords="offset points", fontsize=8, color="0.25")
    cross = bars["crossing_length_um"].to_numpy(float)
    cross = cross[np.isfinite(cross) & (cross >= a.min()) & (cross <= a_max)]
    if cross.size:
        rc = np.interp(cross, a[ok], r[ok])
        ax.plot(cross, rc, ls="none", marker="^", ms=6, mfc="white", mec="black", label="slip crosses a barrier")
    if result.dips is not None and len(result.dips):
        dp = result.dips[(result.dips["dadn_min_um_per_cycle"] > 0)]
        ax.plot(dp["crack_length_um"], dp["dadn_min_um_per_cycle"], ls="none", marker="v", ms=6,
                color=plt.get_cmap(SCALAR_CMAP)(0.75), mec="black", label="dip minimum")
    if np.isfinite(result.arrest_length_um):
        ax.axvline(result.arrest_length_um, color=_ARREST_COLOUR, lw=2.0,
                   label=f"arrest at {result.arrest_length_um:.0f} µm")
        ax.plot([result.arrest_length_um], [r[ok].min() if ok.any() else 1e-9], marker="X", ms=9,
                color=_ARREST_COLOUR, ls="none")
    ax.set_xlabel("crack length along the path a (µm)")
    ax.set_ylabel("da/dN (µm/cycle)")
    ax.set_title(f"Predicted growth rate at σ_a = {result.stress_amplitude:g} MPa")
    ax.grid(True, which="both", alpha=0.2)
    ax.legend(fontsize=8, loc="lower right")
    return fig


def plot_crack_length(result, ax: Axes | None = None) -> Figure:
    """Crack length (µm) against cycles, with the Monte Carlo band when present."""
    fig, ax = _axes(ax)
    prof = result.profile
    n = prof["cycles"].to_numpy(float)
    a = prof["crack_length_um"].to_numpy(float)
    fin = np.isfinite(n)
    if result.bands is not None:
        b = result.bands
        for col, ls in (("cycles_p05", ":"), ("cycles_p95", "--")):
            v = b[col].to_numpy(float)
            f = np.isfinite(v)
            ax.plot(v[f], b["crack_length_um"][f], color="0.4", ls=ls, lw=1, label=f"{col[-3:]} percentile (cycles)")
    ax.plot(n[fin], a[fin], color=plt.get_cmap(SCALAR_CMAP)(0.15), lw=1.6, label="predicted a (µm)")
    for d in result.barriers["position_um"]:
        if d <= a.max():
            ax.axhline(d, color=_BARRIER_COLOUR, ls="--", lw=0.6)
    if np.isfinite(result.arrest_length_um):
        ax.axhline(result.arrest_length_um, color=_ARREST_COLOUR, lw=2, label="arrest (cycles → ∞)")
    ax.set_xlabel("cycles N")
    ax.set_ylabel("crack length along the path a (µm)")
    ax.grid(True, alpha=0.2)
    ax.legend(fontsize=8, loc="lower right")
    return fig


def plot_growth_on_map(result, gg=None, ax: Axes | None = None) -> Figure:
    """The path on the grain map coloured by log₁₀ da/dN, barriers and arrest marked.

    Parameters
    ----------
    result
        A :class:`slipnet.growth.GrowthResult` whose path has map coordinates (from a forecast).
    gg
        The ``GrainGraph``; its grain boundaries are drawn underneath when given.
    ax
        Axes to draw into.
    """
    path = result.path
    if path.polyline is None:
        raise ParameterError("the growth path has no map coordinates; build it from a forecast to draw it on the map")
    fig, ax = _axes(ax, size=(6.5, 6.0))
    if gg is not None:
        labels = np.asarray(gg.labels)
        edge = np.zeros(labels.shape, dtype=bool)
        edge[:, 1:] |= labels[:, 1:] != labels[:, :-1]
        edge[1:, :] |= labels[1:, :] != labels[:-1, :]
        shade = np.where(labels < 0, 0.55, np.where(edge, 0.2, 0.93))
        ax.imshow(shade, cmap="gray", vmin=0, vmax=1, extent=map_extent(gg.omap), origin="upper",
                  interpolation="nearest")
    prof = result.profile
    ok = (prof["dadn_um_per_cycle"] > 0).to_numpy()
    a = prof["crack_length_um"].to_numpy(float)[ok]
    lr = np.log10(prof["dadn_um_per_cycle"].to_numpy(float)[ok])
    s0 = path.polyline[0, 0]
    # sample the path every profile point, plus the polyline corners so the drawn line keeps its shape
    s = np.unique(np.concatenate([a[a >= s0], path.polyline[:, 0]]))
    s = s[s <= a.max()] if a.size else s
    x, y = path.locate(s)
    val = np.interp(0.5 * (s[1:] + s[:-1]), a, lr) if a.size else np.zeros(max(s.size - 1, 0))
    segs = np.stack([np.column_stack([x[:-1], y[:-1]]), np.column_stack([x[1:], y[1:]])], axis=1)
    norm = Normalize(vmin=float(val.min()) if val.size else -6, vmax=float(val.max()) if val.size else -3)
    lc = LineCollection(segs, cmap=SCALAR_CMAP, norm=norm, linewidths=3.5)
    lc.set_array(val)
    ax.add_collection(lc)
    ax.plot(path.polyline[:, 1], path.polyline[:, 2], color="0.3", lw=0.8, ls=":", zorder=1)
    bx, by = path.locate(path.barrier_positions_um)
    ax.plot(bx, by, ls="none", marker="s", ms=6, mfc="white", mec="black", label="barrier (grain boundary)")
    names = [_barrier_name(row) for _, row in result.barriers.iterrows()]
    for i, (u, v) in enumerate(zip(np.atleast_1d(bx), np.atleast_1d(by), strict=True)):
        ax.annotate(names[i] if i < len(names) else f"#{i + 1}", (u, v), xytext=(4, 4), textcoords="offset points",
                    fontsize=8)
    x0, y0 = path.locate(s0)
    ax.plot([x0], [y0], marker="o", ms=7, color="black", ls="none", label="path start")
    if np.isfinite(result.arrest_length_um):
        ax_, ay_ = path.locate(result.arrest_length_um)
        ax.plot([ax_], [ay_], marker="X", ms=11, color=_ARREST_COLOUR, ls="none", label="arrest")
    # frame the path with some of its neighbourhood: a short path on a large map would be a dot
    span = max(np.ptp(path.polyline[:, 1]), np.ptp(path.polyline[:, 2]), 1.0)
    pad = 0.5 * span
    if gg is not None:
        x0m, x1m, y1m, y0m = map_extent(gg.omap)
        pad = max(pad, 0.08 * (x1m - x0m))
    xl = (path.polyline[:, 1].min() - pad, path.polyline[:, 1].max() + pad)
    yl = (path.polyline[:, 2].max() + pad, path.polyline[:, 2].min() - pad)
    if gg is not None:
        xl = (max(xl[0], x0m), min(xl[1], x1m))
        yl = (min(yl[0], y1m), max(yl[1], y0m))
    ax.set_xlim(*xl)
    ax.set_ylim(*yl)
    label_map_axes(ax)
    add_scale_bar(ax)
    cb = fig.colorbar(lc, ax=ax, shrink=0.8)
    cb.set_label("log₁₀ da/dN (da/dN in µm/cycle)")
    ax.legend(fontsize=8, loc="upper right")
    ax.set_title("Predicted growth rate along the forecast path")
    return fig
