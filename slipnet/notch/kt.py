"""Stress concentration at a notch root: the chart fit, the growing-crack cap, or a full-field solve."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from slipnet.errors import ParameterError
from slipnet.maps.notch import notch_mask
from slipnet.notch.settings import Candidate, PlanSettings
from slipnet.stress.elastic import solve_elastic
from slipnet.stress.local import edge_concentration

__all__ = ["full_field_kt", "notch_stress_factor", "peterson_kt"]


def peterson_kt(depth_um, root_radius_um, opening_deg=0.0) -> np.ndarray | float:
    """Elastic stress concentration factor of an edge notch in a semi-infinite plate.

    Parameters
    ----------
    depth_um, root_radius_um
        Notch depth t and root radius r, µm (any common length unit: only t/r enters).
    opening_deg
        V-notch opening angle, degrees (0: U notch).

    Returns
    -------
    float or ndarray
        K_t = 0.855 + 2.21 √(t/r) (Peterson's chart fit, Pilkey & Pilkey 2008, from memory;
        fitted for 1 ≤ t/r ≤ 361, used outside that range with a warning in the notes of a plan),
        unchanged for opening angles ≤ 90° and falling linearly to 1 at 180°.

    Examples
    --------
    >>> round(float(peterson_kt(50.0, 10.0)), 3)
    5.797
    """
    t = np.asarray(depth_um, dtype=float)
    r = np.asarray(root_radius_um, dtype=float)
    a = np.asarray(opening_deg, dtype=float)
    if np.any(~np.isfinite(t)) or np.any(t <= 0):
        raise ParameterError(f"depth_um should be > 0; got {depth_um!r}")
    if np.any(~np.isfinite(r)) or np.any(r <= 0):
        raise ParameterError(f"root_radius_um should be > 0; got {root_radius_um!r}")
    if np.any(~np.isfinite(a)) or np.any((a < 0) | (a > 180)):
        raise ParameterError(f"opening_deg should lie in [0, 180]; got {opening_deg!r}")
    ku = 0.855 + 2.21 * np.sqrt(t / r)
    frac = np.clip((180.0 - a) / 90.0, 0.0, 1.0)
    k = 1.0 + (ku - 1.0) * frac
    return float(k) if k.ndim == 0 else k


def notch_stress_factor(kt: float, depth_um: float, crack_um) -> np.ndarray | float:
    """Stress magnification felt by a crack of length ``a`` grown from a notch root.

    k(a) = min(K_t, √((t + a)/a)): the short-crack limit (the crack inside the notch field sees
    K_t σ) and the long-crack limit (a crack of length t + a under σ), the smaller of the two
    (Dowling 1979; Smith & Miller 1978).
    """
    a = np.asarray(crack_um, dtype=float)
    if np.any(a <= 0):
        raise ParameterError(f"crack_um should be > 0; got {crack_um!r}")
    k = np.minimum(float(kt), np.sqrt((float(depth_um) + a) / a))
    return float(k) if k.ndim == 0 else k


def _padded_for_edge(omap, normal):
    """The map with a compliant margin (a fifth of its size) outside the notched side.

    In the periodic cell of the spectral solver the map edge is not a free surface; an unindexed
    (compliant) margin beyond the notched edge makes it one, so the slot is an edge notch.
    """
    ny, nx = omap.shape
    n = np.asarray(normal, dtype=float)
    if abs(n[1]) >= abs(n[0]):
        pad = max(2, ny // 5)
        pad += pad % 2  # keep row 0 an unshifted row on hex grids
        widths = ((pad, 0), (0, 0)) if n[1] > 0 else ((0, pad), (0, 0))
        shift = (0.0, -pad * omap.row_spacing if n[1] > 0 else 0.0)
    else:
        pad = max(2, nx // 5)
        widths = ((0, 0), (pad, 0)) if n[0] > 0 else ((0, 0), (0, pad))
        shift = (-pad * omap.step if n[0] > 0 else 0.0, 0.0)
    q = np.pad(omap.quats, (*widths, (0, 0)), constant_values=np.nan)
    return replace(
        omap, quats=q, phase=np.pad(omap.phase, widths, constant_values=-1),
        quality=np.pad(omap.quality, widths), indexed=np.pad(omap.indexed, widths),
        origin=(omap.origin[0] + shift[0], omap.origin[1] + shift[1]), meta=dict(omap.meta))


def full_field_kt(gg, cand: Candidate, s: PlanSettings) -> float:
    """K_t at a candidate root from a full-field elastic solve with the notch cut into the map.

    The map gets a compliant margin beyond the notched edge (a free surface, see
    :func:`_padded_for_edge`) and the notch points become compliant; the solve
    (:func:`slipnet.stress.solve_elastic`, generalized plane strain, periodic cell, columnar grains)
    runs at the nominal stress along the load axis, and K_t is the edge value of the load-axis
    normal stress over the applied one, fitted to the layers a short distance below the root
    (:func:`slipnet.stress.edge_concentration`), which converges as the step shrinks where the
    largest single point at the staircase edge does not. Only valid for a
    notch from a map side (normal along x or y); any other edge is refused.
    """
    n = np.array([cand.normal_x, cand.normal_y])
    if min(abs(n[0]), abs(n[1])) > 1e-6:
        raise ParameterError("concentration='full_field' needs a notch from a map side (normal along x or y); "
                             "use concentration='peterson' for an oblique edge")
    om = _padded_for_edge(gg.omap, n)
    x, y = om.coordinates()
    om = om.select(~notch_mask(x, y, (cand.edge_x, cand.edge_y), n, s.notch, behind_um=om.step))
    field = solve_elastic(om, s.load_axis, stress=s.stress_amplitude, tol=1e-5, unindexed="compliant")
    res = edge_concentration(field, cand.root_x, cand.root_y, s.notch.root_radius_um)
    return float(res["concentration"])
