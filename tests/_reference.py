"""Slow, obvious reference kernels that only the tests use (imported as ``from _reference import ...``).

They once lived beside the production kernels; the package never calls them. Each is the plain
serial version of a fused or parallel kernel, so the tests can check the fast one against it
(compiled and through ``.py_func``).
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.grains._pair_kernels import _angle_between


@nb.njit(cache=True)
def pair_disorientation(quats, valid, phase, a, b, out):
    """Cubic disorientation (degrees, float32) of every pair; NaN if a point is invalid or phases differ.

    Reference for the fused pairs-and-angles kernel ``fill_pairs_with_angles``.
    """
    to_deg = 180.0 / math.pi
    for k in range(a.shape[0]):
        p = a[k]
        r = b[k]
        if valid[p] and valid[r] and phase[p] == phase[r]:
            out[k] = _angle_between(quats, r, p) * to_deg
        else:
            out[k] = np.nan


@nb.njit(cache=True)
def kam_sums(a, b, angle, labels, threshold, sums, counts):
    """Accumulate, per point, the angles of its pairs inside one grain and below ``threshold``.

    Serial reference for the row-parallel ``kam_rows`` (which needs no label lookup).
    """
    for k in range(a.shape[0]):
        ang = angle[k]
        if not ang < threshold:
            continue
        p = a[k]
        r = b[k]
        if labels[p] < 0 or labels[p] != labels[r]:
            continue
        sums[p] += ang
        sums[r] += ang
        counts[p] += 1
        counts[r] += 1
