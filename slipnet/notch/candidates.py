"""Candidate notch positions along a specimen edge, with their inward normals and roots."""

from __future__ import annotations

import math

import numpy as np

from slipnet._checks import check_positive
from slipnet.errors import ParameterError
from slipnet.maps.notch import SIDES, NotchShape
from slipnet.notch.settings import Candidate

__all__ = ["candidate_positions", "edge_of_map"]


def edge_of_map(omap, side: str) -> np.ndarray:
    """The edge of the map's point grid on one side, as a two-point polyline in µm."""
    side = str(side).lower()
    if side not in SIDES:
        raise ParameterError(f"side should be one of {', '.join(SIDES)}; got {side!r}")
    x0, x1, y0, y1 = omap.extent
    return {
        "left": np.array([[x0, y0], [x0, y1]]),
        "right": np.array([[x1, y0], [x1, y1]]),
        "top": np.array([[x0, y0], [x1, y0]]),
        "bottom": np.array([[x0, y1], [x1, y1]]),
    }[side]


def _as_edge(gg, edge) -> np.ndarray:
    if isinstance(edge, str):
        return edge_of_map(gg.omap, edge)
    e = np.asarray(edge, dtype=float)
    if e.ndim != 2 or e.shape[1] != 2 or e.shape[0] < 2 or not np.all(np.isfinite(e)):
        raise ParameterError(f"edge should be two or more (x, y) points in µm or a side name; got {edge!r}")
    seg = np.linalg.norm(np.diff(e, axis=0), axis=1)
    if np.any(seg <= 0):
        raise ParameterError("edge should not repeat a point (zero-length segment)")
    return e


def candidate_positions(gg, edge, spacing_um: float, notch: NotchShape) -> list[Candidate]:
    """Candidate notch positions every ``spacing_um`` along ``edge``, with their roots.

    The notch runs along the edge normal that points into the map (towards more indexed points
    within one notch depth); its root is ``depth_um`` along it.

    Raises
    ------
    ParameterError
        For a spacing ≤ 0, an edge that lies outside the map, or a notch deeper than the map.
    """
    spacing = check_positive(spacing_um, "spacing_um")
    e = _as_edge(gg, edge)
    om = gg.omap
    x0, x1, y0, y1 = om.extent
    tol = 0.5 * om.step + 1e-9
    outside = (e[:, 0] < x0 - tol) | (e[:, 0] > x1 + tol) | (e[:, 1] < y0 - tol) | (e[:, 1] > y1 + tol)
    if np.any(outside):
        raise ParameterError(
            f"edge point(s) {e[outside].round(2).tolist()} µm lie outside the map "
            f"(x {x0:g}..{x1:g}, y {y0:g}..{y1:g} µm); give an edge on or inside the map"
        )
    seg = np.diff(e, axis=0)
    seg_len = np.linalg.norm(seg, axis=1)
    cum = np.concatenate([[0.0], np.cumsum(seg_len)])
    total = cum[-1]
    if spacing > total:
        s = np.array([0.5 * total])
    else:
        n = math.floor(total / spacing + 1e-9)
        s = (np.arange(n + 1) * spacing) + 0.5 * (total - n * spacing)
    k = np.clip(np.searchsorted(cum, s, side="right") - 1, 0, len(seg) - 1)
    t = (s - cum[k]) / seg_len[k]
    pts = e[k] + t[:, None] * seg[k]
    tangent = seg[k] / seg_len[k][:, None]
    normal = np.stack([-tangent[:, 1], tangent[:, 0]], axis=1)
    depth = notch.depth_um
    # The inward sense: the side with more indexed points half a depth in.
    probe = np.array([0.5, 1.0]) * depth
    score = np.zeros(len(pts))
    for p in probe:
        for sgn in (1.0, -1.0):
            q = pts + sgn * p * normal
            score += sgn * (gg.grain_at(q[:, 0], q[:, 1]) >= 0)
    normal = np.where((score >= 0)[:, None], normal, -normal)
    roots = pts + depth * normal
    i, _ = om.index_of(roots[:, 0], roots[:, 1])
    if np.all(i < 0):
        raise ParameterError(
            f"notch depth {depth:g} µm puts every root outside the map; the notch is deeper than the map "
            "across this edge — use a shallower notch or another edge"
        )
    keep = i >= 0
    return [
        Candidate(int(c), float(p[0]), float(p[1]), float(nn[0]), float(nn[1]), float(r[0]), float(r[1]))
        for c, (p, nn, r) in enumerate(zip(pts[keep], normal[keep], roots[keep], strict=True))
    ]
