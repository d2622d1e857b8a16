"""The one notch shape of the package, where it is cut, and which map points it removes.

A notch is cut from an edge point along the inward unit normal: a V whose flanks are
``opening_deg`` apart, tangent to a root circle of radius ``root_radius_um`` whose far point,
``depth_um`` from the edge, is the notch root (``opening_deg = 0`` gives a U notch, a slot of
width ``2·root_radius_um``). The synthetic generator, the notch planner and the full-field solve
all use this shape and :func:`notch_mask`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from slipnet._checks import check_choice, check_positive, check_range
from slipnet.errors import ParameterError

__all__ = ["MAX_OPENING_DEG", "SIDES", "NotchShape", "notch_mask", "side_notch"]

#: Map sides a notch can be cut from: ``left`` (x = x_min), ``right``, ``top`` (y = y_min, row 0), ``bottom``.
SIDES = ("left", "right", "top", "bottom")
#: Widest opening accepted, degrees (wider is hardly a notch: K_t tends to 1).
MAX_OPENING_DEG = 150.0


@dataclass(frozen=True)
class NotchShape:
    """Geometry of a notch.

    Attributes
    ----------
    depth_um
        Depth t from the edge to the root, µm (> 0).
    root_radius_um
        Root radius r, µm (> 0, at most the depth).
    opening_deg
        Angle between the flanks, degrees, in [0, 150] (0: U notch).
    """

    depth_um: float = 50.0
    root_radius_um: float = 10.0
    opening_deg: float = 0.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "depth_um", check_positive(self.depth_um, "notch depth_um"))
        object.__setattr__(self, "root_radius_um", check_positive(self.root_radius_um, "notch root_radius_um"))
        object.__setattr__(self, "opening_deg",
                           check_range(self.opening_deg, "notch opening_deg", 0.0, MAX_OPENING_DEG))
        if self.root_radius_um > self.depth_um:
            raise ParameterError(f"notch root_radius_um should not exceed depth_um ({self.depth_um:g}); "
                                 f"got {self.root_radius_um:g}")

    def as_dict(self) -> dict:
        """The three numbers, JSON-safe."""
        return {"depth_um": self.depth_um, "root_radius_um": self.root_radius_um, "opening_deg": self.opening_deg}


def notch_mask(x, y, edge_xy, normal, shape: NotchShape, *, behind_um: float = 0.0) -> np.ndarray:
    """Points inside a notch cut from ``edge_xy`` along the inward unit ``normal``.

    Parameters
    ----------
    x, y : array_like
        Point coordinates, µm (any matching shapes).
    edge_xy : (2,) array_like
        Where the notch axis meets the edge, µm.
    normal : (2,) array_like
        Inward unit normal (the notch axis, pointing into the material).
    shape
        The notch.
    behind_um
        How far behind the edge (outside the material) the cut still reaches, µm.

    Returns
    -------
    ndarray of bool
        Same shape as ``x``.

    Examples
    --------
    >>> m = notch_mask([0.0, 5.0, 30.0], [0.0, 0.0, 0.0], (0.0, 0.0), (1.0, 0.0), NotchShape(20.0, 5.0))
    >>> m.tolist()
    [True, True, False]
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = np.asarray(normal, dtype=float)
    n = n / np.linalg.norm(n)
    dx, dy = x - float(edge_xy[0]), y - float(edge_xy[1])
    u = dx * n[0] + dy * n[1]  # depth below the edge
    v = -dx * n[1] + dy * n[0]  # across the notch axis
    rho = shape.root_radius_um
    half = math.radians(0.5 * shape.opening_deg)
    uc = shape.depth_um - rho  # centre of the root circle
    # flanks tangent to the root circle: |v| = rho/cos(half) + (uc − u)·tan(half) up to the tangent points
    flank = (u >= -behind_um) & (u <= uc + rho * math.sin(half)) & (
        np.abs(v) <= rho / math.cos(half) + (uc - u) * math.tan(half))
    return flank | ((u - uc) ** 2 + v**2 <= rho**2)


def side_notch(side: str, position_um: float | None, shape: NotchShape,
               extent: tuple[float, float, float, float]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Edge point, inward normal and root of a notch cut into one side of a map.

    Parameters
    ----------
    side
        One of :data:`SIDES`.
    position_um
        Position of the notch axis along that side, µm from the map origin (y for left/right, x
        for top/bottom); None: mid-side.
    shape
        The notch.
    extent
        ``(x_min, x_max, y_min, y_max)`` of the map, µm.

    Returns
    -------
    edge_xy, normal, root : (2,) ndarrays
        µm, unit, µm.
    """
    side = check_choice(side, "notch side", SIDES)
    x0, x1, y0, y1 = (float(v) for v in extent)
    along = (y0, y1) if side in ("left", "right") else (x0, x1)
    across = (x1 - x0) if side in ("left", "right") else (y1 - y0)
    pos = 0.5 * (along[0] + along[1]) if position_um is None else float(position_um)
    if not along[0] <= pos <= along[1]:
        raise ParameterError(f"notch position_um should lie in [{along[0]:g}, {along[1]:g}] µm along the {side} "
                             f"side; got {pos}")
    if shape.depth_um >= across:
        raise ParameterError(f"notch depth_um should be less than the map size across it ({across:g} µm); "
                             f"got {shape.depth_um:g}")
    edge, normal = {
        "left": ((x0, pos), (1.0, 0.0)), "right": ((x1, pos), (-1.0, 0.0)),
        "top": ((pos, y0), (0.0, 1.0)), "bottom": ((pos, y1), (0.0, -1.0)),
    }[side]
    edge, normal = np.array(edge), np.array(normal)
    return edge, normal, edge + shape.depth_um * normal
