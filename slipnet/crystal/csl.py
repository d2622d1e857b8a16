"""Boundary classes of grain boundaries: CSL rotations, the Brandon criterion, Mackenzie curves.

Used by :func:`slipnet.grains.build_grain_graph` (and re-exported from :mod:`slipnet.grains`).

Boundary classes (:data:`BOUNDARY_CLASSES`), in order of precedence:

* ``"phase_boundary"``: the two grains belong to different phases;
* ``"subgrain"``: misorientation below ``subgrain_deg`` (only when it is given; such grain–grain
  boundaries are rare, because sub-grain boundaries normally lie *inside* grains: those are kept
  apart, in :attr:`GrainGraph.subgrain_labels` and :attr:`GrainGraph.subgrain_boundaries`);
* ``"low_angle"``: below 15° (common practice; low-angle takes precedence over CSL, i.e. Σ1);
* ``"sigma3"`` … ``"sigma29b"``: coincidence-site-lattice boundaries by the Brandon (1966, Acta
  Metall. 14:1479) criterion: the disorientation between the boundary misorientation and the CSL
  rotation, searched over all symmetric equivalents, is at most 15°·Σ^(−1/2); if several match,
  the lowest Σ wins;
* ``"high_angle"``: everything else.
"""

from __future__ import annotations

import math
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np

from slipnet.crystal import orientation_kernels as _k
from slipnet.crystal.orientation import (
    CUBIC_OPERATORS,
    disorientation_angle,
    quat_from_axis_angle,
    quat_multiply,
    random_quats,
)
from slipnet.sized_kernels import kernel_input

if TYPE_CHECKING:  # pandas is imported where a table is made: it costs ~0.5 s at start-up
    import pandas as pd

__all__ = [
    "BOUNDARY_CLASSES",
    "CSL_TABLE",
    "LOW_ANGLE_DEG",
    "classify_boundaries",
    "csl_rotations",
    "mackenzie_cdf",
    "mackenzie_density",
]

#: Low-angle / high-angle limit, degrees (common practice).
LOW_ANGLE_DEG = 15.0

#: Coincidence site lattice rotations for cubic lattices: (class, Σ, axis ⟨hkl⟩, m, n), with the
#: rotation angle θ = 2·atan(n·√(h²+k²+l²)/m) and Σ = (m² + n²(h²+k²+l²)) / 2^k odd
#: (Ranganathan 1966, Acta Cryst. 21:197; angles as tabulated by Grimmer, Bollmann & Warrington
#: 1974, Acta Cryst. A30:197).
CSL_TABLE: tuple[tuple[str, int, tuple[int, int, int], int, int], ...] = (
    ("sigma3", 3, (1, 1, 1), 3, 1),
    ("sigma5", 5, (1, 0, 0), 3, 1),
    ("sigma7", 7, (1, 1, 1), 5, 1),
    ("sigma9", 9, (1, 1, 0), 4, 1),
    ("sigma11", 11, (1, 1, 0), 3, 1),
    ("sigma13a", 13, (1, 0, 0), 5, 1),
    ("sigma13b", 13, (1, 1, 1), 7, 1),
    ("sigma15", 15, (2, 1, 0), 5, 1),
    ("sigma17a", 17, (1, 0, 0), 4, 1),
    ("sigma17b", 17, (2, 2, 1), 5, 1),
    ("sigma19a", 19, (1, 1, 0), 6, 1),
    ("sigma19b", 19, (1, 1, 1), 4, 1),
    ("sigma21a", 21, (1, 1, 1), 9, 1),
    ("sigma21b", 21, (2, 1, 1), 6, 1),
    ("sigma23", 23, (3, 1, 1), 9, 1),
    ("sigma25a", 25, (1, 0, 0), 7, 1),
    ("sigma25b", 25, (3, 3, 1), 9, 1),
    ("sigma27a", 27, (1, 1, 0), 5, 1),
    ("sigma27b", 27, (2, 1, 0), 7, 1),
    ("sigma29a", 29, (1, 0, 0), 5, 2),
    ("sigma29b", 29, (2, 2, 1), 7, 1),
)

#: Every value the ``boundary_class`` column / edge attribute can take.
BOUNDARY_CLASSES: tuple[str, ...] = (
    "phase_boundary", "subgrain", "low_angle", *(row[0] for row in CSL_TABLE), "high_angle",
)


# ============================================================================ CSL and Mackenzie
def csl_rotations() -> pd.DataFrame:
    """The CSL rotations of :data:`CSL_TABLE` as a table.

    Returns
    -------
    DataFrame
        Columns ``boundary_class``, ``sigma``, ``axis_h``, ``axis_k``, ``axis_l``, ``angle_deg``,
        ``brandon_limit_deg`` (15°·Σ^(−1/2)), ``qw``, ``qx``, ``qy``, ``qz``.
    """
    import pandas as pd

    rows = []
    for name, sigma, axis, m, n in CSL_TABLE:
        angle = math.degrees(2.0 * math.atan(n * math.sqrt(sum(h * h for h in axis)) / m))
        q = quat_from_axis_angle(axis, angle)
        rows.append((name, sigma, *axis, angle, 15.0 / math.sqrt(sigma), *q))
    return pd.DataFrame(rows, columns=["boundary_class", "sigma", "axis_h", "axis_k", "axis_l", "angle_deg",
                                       "brandon_limit_deg", "qw", "qx", "qy", "qz"])


@lru_cache(maxsize=2)
def _mackenzie_sample(n_pairs: int, seed: int) -> np.ndarray:
    a = random_quats(n_pairs, seed=seed)
    b = random_quats(n_pairs, seed=seed + 1)
    out = np.sort(disorientation_angle(a, b))
    out.setflags(write=False)
    return out


def mackenzie_cdf(angle_deg, *, n_pairs: int = 1_000_000, seed: int = 0) -> np.ndarray:
    """Cumulative Mackenzie (1958) distribution of random cubic disorientations, computed numerically.

    Parameters
    ----------
    angle_deg : array_like
        Angles in degrees.
    n_pairs, seed
        Number of uniformly random orientation pairs drawn (seeded) to build the curve.

    Returns
    -------
    ndarray
        P(disorientation ≤ angle), same shape as ``angle_deg``.
    """
    s = _mackenzie_sample(int(n_pairs), int(seed))
    return np.searchsorted(s, np.asarray(angle_deg, dtype=np.float64), side="right") / s.size


def mackenzie_density(edges_deg, *, n_pairs: int = 1_000_000, seed: int = 0) -> np.ndarray:
    """Mackenzie (1958) probability density per degree in each bin of ``edges_deg`` (k+1 edges → k values)."""
    e = np.asarray(edges_deg, dtype=np.float64)
    return np.diff(mackenzie_cdf(e, n_pairs=n_pairs, seed=seed)) / np.diff(e)


def classify_boundaries(angle: np.ndarray, dq: np.ndarray, same_phase: np.ndarray, subgrain_deg: float | None):
    table = csl_rotations()
    cq = table[["qw", "qx", "qy", "qz"]].to_numpy()
    equiv = np.ascontiguousarray(quat_multiply(cq[:, None, :], CUBIC_OPERATORS[None, :, :]))
    dev = np.empty((dq.shape[0], len(table)))
    if dq.shape[0]:
        _k.csl_deviation(kernel_input(dq), kernel_input(angle), kernel_input(equiv),
                         kernel_input(table["angle_deg"].to_numpy()), kernel_input(table["brandon_limit_deg"].to_numpy()),
                         dev)
    match = dev <= table["brandon_limit_deg"].to_numpy()[None, :]
    first = np.argmax(match, axis=1)
    anym = match.any(axis=1)
    names = table["boundary_class"].to_numpy(dtype=object)
    cls = np.where(angle < LOW_ANGLE_DEG, "low_angle", "high_angle").astype(object)
    csl = anym & (angle >= LOW_ANGLE_DEG)
    cls[csl] = names[first[csl]]
    deviation = np.where(csl, dev[np.arange(dev.shape[0]), first], np.nan)
    if subgrain_deg is not None:
        cls[angle < subgrain_deg] = "subgrain"
    cls[~same_phase] = "phase_boundary"
    deviation[~same_phase] = np.nan
    return cls, deviation
