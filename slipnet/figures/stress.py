"""Pictures of a full-field stress solution: a stress component, the largest local Schmid factor,
and its difference from the uniform-stress estimate. Every picture carries the model assumptions."""

from __future__ import annotations

import textwrap

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.colors import TwoSlopeNorm

from slipnet.figures._common import DIVERGING_CMAP, SCALAR_CMAP, add_scale_bar, label_map_axes, map_extent

__all__ = [
    "plot_max_local_schmid",
    "plot_schmid_difference",
    "plot_stress_component",
]

_NAMES = "xyz"


def _caption(ax, text: str) -> None:
    # under the x label of the map axes (not the figure), so no gap opens when the map is flat
    ax.text(0.5, -0.16, "\n".join(textwrap.wrap(text, 110)), transform=ax.transAxes, ha="center", va="top",
            fontsize=7, color="0.25")


def _map_axes(field, ax):
    if ax is None:
        ny, nx = field.shape
        fig, ax = plt.subplots(figsize=(7.0, 5.0 * ny / max(nx, 1) + 1.2))  # the map is about 5 in wide
    else:
        fig = ax.figure
    return fig, ax


def _show(ax, field, values, cmap, norm, label):
    img = np.ma.masked_where(field.compliant | ~np.isfinite(values), values)
    cm = plt.get_cmap(cmap).copy()
    cm.set_bad("0.6")
    im = ax.imshow(img, extent=map_extent(field.omap), origin="upper", cmap=cm, norm=norm, interpolation="nearest")
    cb = ax.figure.colorbar(im, ax=ax, shrink=0.8)
    cb.set_label(label)
    label_map_axes(ax)
    add_scale_bar(ax)
    return im


def plot_stress_component(field, component="load", ax=None):
    """Map one stress component, diverging colours centred on the applied stress (MPa).

    Parameters
    ----------
    field
        A :class:`~slipnet.stress.StressField`.
    component
        ``"load"`` (normal stress along the load axis), ``"von_mises"``, or a pair ``(i, j)`` of
        map-frame indices 0..2 (x, y, z).
    ax
        Axes to draw into (a new figure if None).

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = _map_axes(field, ax)
    if isinstance(component, str) and component == "load":
        vals = field.normal_stress()
        name = "normal stress along the load axis"
        centre = field.applied_stress
    elif isinstance(component, str) and component == "von_mises":
        vals = field.von_mises()
        name = "von Mises stress"
        centre = abs(field.applied_stress)
    else:
        i, j = (int(c) for c in component)
        vals = field.stress[..., i, j]
        name = f"σ_{_NAMES[i]}{_NAMES[j]}"
        centre = float(field.applied_tensor[i, j])
    solid = vals[~field.compliant]
    span = max(float(np.nanmax(np.abs(solid - centre))) if solid.size else 1.0, 1e-9 * max(abs(centre), 1.0))
    norm = TwoSlopeNorm(vcenter=centre, vmin=centre - span, vmax=centre + span)
    _show(ax, field, vals, DIVERGING_CMAP, norm, f"{name} (MPa)")
    ax.set_title(f"Local {name}; applied {field.applied_stress:g} MPa along "
                 f"({field.load_axis[0]:.2f}, {field.load_axis[1]:.2f}, {field.load_axis[2]:.2f})", fontsize=10)
    _caption(ax, field.assumptions)
    return fig


def plot_max_local_schmid(field, systems=None, ax=None):
    """Map the largest local Schmid factor ``max_α |τ_α| / σ_applied`` (viridis, no unit)."""
    from slipnet.stress.local import local_schmid_factors

    fig, ax = _map_axes(field, ax)
    vals = np.nanmax(np.abs(local_schmid_factors(field, systems=systems)), axis=-1, initial=-np.inf)
    vals = np.where(np.isfinite(vals), vals, np.nan)
    _show(ax, field, vals, SCALAR_CMAP, None, "largest local Schmid factor |τ|/σ (–)")
    ax.set_title("Largest local Schmid factor from the full-field stress", fontsize=10)
    _caption(ax, field.assumptions)
    return fig


def plot_schmid_difference(field, systems=None, ax=None):
    """Map the largest local Schmid factor minus the largest uniform-stress Schmid factor (diverging)."""
    from slipnet.stress.local import default_systems, local_schmid_factors, uniform_schmid_factors

    systems = default_systems(field.omap, systems)
    fig, ax = _map_axes(field, ax)
    loc = np.abs(local_schmid_factors(field, systems=systems))
    q = field.omap.quats.reshape(-1, 4)
    ok = np.all(np.isfinite(q), axis=1)
    uni = np.full((q.shape[0], loc.shape[-1]), np.nan)
    if ok.any():
        uni[ok] = np.abs(uniform_schmid_factors(q[ok], field.load_axis, systems))
    uni = uni.reshape(loc.shape)
    with np.errstate(invalid="ignore"):
        diff = np.max(np.where(np.isfinite(loc), loc, -np.inf), axis=-1) - np.max(
            np.where(np.isfinite(uni), uni, -np.inf), axis=-1)
    diff = np.where(np.isfinite(diff), diff, np.nan)
    span = float(np.nanmax(np.abs(diff[~field.compliant]))) if np.isfinite(diff).any() else 0.0
    span = max(span, 1e-6)
    _show(ax, field, diff, DIVERGING_CMAP, TwoSlopeNorm(vcenter=0.0, vmin=-span, vmax=span),
          "local − uniform largest Schmid factor (–)")
    ax.set_title("Largest local Schmid factor minus the uniform-stress estimate", fontsize=10)
    _caption(ax, field.assumptions)
    return fig


