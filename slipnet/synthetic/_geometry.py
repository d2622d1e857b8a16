"""Grid geometry of the synthetic specimen generator: point positions, disk placement, power
cells, grain-boundary points, disk stencils and the notch mask.

Private helpers of :mod:`slipnet.synthetic._steps`; the per-point hot loop is in
:mod:`slipnet.synthetic._kernels`.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.spatial import cKDTree

from slipnet.maps.notch import NotchShape, notch_mask, side_notch
from slipnet.synthetic import _kernels as _k


def _grid_xy(rows: np.ndarray, nx: int, step: float, grid: str) -> tuple[np.ndarray, np.ndarray]:
    """Positions (µm, origin 0) of the points in the given rows, each shape (len(rows), nx)."""
    rs = step * (math.sqrt(3.0) / 2.0 if grid == "hex" else 1.0)
    x = np.arange(nx, dtype=np.float64)[None, :] * step
    if grid == "hex":
        x = x + 0.5 * step * (rows[:, None] % 2)
    y = np.broadcast_to(rows[:, None] * rs, (rows.size, nx))
    return np.broadcast_to(x, (rows.size, nx)), y


def _place_disks(radii: np.ndarray, lo: np.ndarray, hi: np.ndarray, rng: np.random.Generator,
                 max_rounds: int = 60) -> np.ndarray:
    """Random sequential addition of non-overlapping disks, in vectorised rounds.

    ``radii`` should be sorted in decreasing order: within a round, a conflict between two new
    disks rejects the smaller (later) one, so large disks are placed first. Returns centres
    ``(n, 2)``, NaN for disks that found no room.
    """
    n = radii.size
    pos = np.full((n, 2), np.nan)
    placed = np.zeros(n, dtype=bool)
    for _ in range(max_rounds):
        pend = np.flatnonzero(~placed)
        if pend.size == 0:
            break
        cand = rng.uniform(lo, hi, size=(pend.size, 2))
        rc = radii[pend]
        ok = np.ones(pend.size, dtype=bool)
        tree_c = cKDTree(cand)
        if placed.any():
            acc = np.flatnonzero(placed)
            ra = radii[acc]
            pairs = tree_c.sparse_distance_matrix(cKDTree(pos[acc]), rc.max() + ra.max(), output_type="ndarray")
            hit = pairs["v"] < rc[pairs["i"]] + ra[pairs["j"]]
            ok[pairs["i"][hit]] = False
        pairs = tree_c.query_pairs(2.0 * rc.max(), output_type="ndarray")
        if pairs.size:
            a, b = pairs[:, 0], pairs[:, 1]
            d = np.hypot(*(cand[a] - cand[b]).T)
            hit = (d < rc[a] + rc[b]) & ok[a] & ok[b]
            # the later candidate of each conflicting pair is the smaller disk: it waits a round
            ok[np.maximum(a, b)[hit]] = False
        pos[pend[ok]] = cand[ok]
        placed[pend[ok]] = True
    return pos


def _power_cells(shape: tuple[int, int], step: float, grid: str, centres: np.ndarray, w: np.ndarray,
                 lo: np.ndarray, hi: np.ndarray, bucket: float) -> np.ndarray:
    """Index of the power cell (argmin |p − s|² − w) of every grid point, shape ``(ny, nx)`` int64."""
    ny, nx = shape
    nbx = max(1, int(np.ceil((hi[0] - lo[0]) / bucket)))
    nby = max(1, int(np.ceil((hi[1] - lo[1]) / bucket)))
    bx = np.clip(((centres[:, 0] - lo[0]) / bucket).astype(np.int64), 0, nbx - 1)
    by = np.clip(((centres[:, 1] - lo[1]) / bucket).astype(np.int64), 0, nby - 1)
    key = by * nbx + bx
    order = np.argsort(key, kind="stable")
    start = np.searchsorted(key[order], np.arange(nbx * nby + 1))
    labels = np.empty((ny, nx), dtype=np.int64)
    rs = step * (math.sqrt(3.0) / 2.0 if grid == "hex" else 1.0)
    _k.power_cell_labels(0, ny, nx, step, rs, grid == "hex", np.ascontiguousarray(centres[:, 0]),
                         np.ascontiguousarray(centres[:, 1]), w, float(w.max()), float(lo[0]), float(lo[1]),
                         float(bucket), nbx, nby, start.astype(np.int64), order.astype(np.int64), labels)
    return labels


def _neighbour_differs(labels: np.ndarray, grid: str) -> np.ndarray:
    """True where a grid neighbour (4 on square, 6 on hex grids) carries another label."""
    ny, _ = labels.shape
    out = np.zeros(labels.shape, dtype=bool)
    d = labels[:, 1:] != labels[:, :-1]
    out[:, 1:] |= d
    out[:, :-1] |= d
    if grid == "square":
        d = labels[1:] != labels[:-1]
        out[1:] |= d
        out[:-1] |= d
        return out
    for parity in (0, 1):
        rows = np.arange(parity, ny - 1, 2)
        if rows.size == 0:
            continue
        a, c = labels[rows], labels[rows + 1]
        d = a != c
        out[rows] |= d
        out[rows + 1] |= d
        if parity == 0:  # an even row's lower neighbours are columns j−1 and j of the next row
            d = a[:, 1:] != c[:, :-1]
            out[rows, 1:] |= d
            out[rows + 1, :-1] |= d
        else:  # an odd (shifted) row's lower neighbours are columns j and j+1
            d = a[:, :-1] != c[:, 1:]
            out[rows, :-1] |= d
            out[rows + 1, 1:] |= d
    return out


def _disk_stencil(radius_um: float, step: float, grid: str, parity: int) -> tuple[np.ndarray, np.ndarray]:
    """Row and column offsets of the grid points within ``radius_um`` of a point on a row of ``parity``."""
    rs = step * (math.sqrt(3.0) / 2.0 if grid == "hex" else 1.0)
    ri = math.ceil(radius_um / rs)
    rj = math.ceil(radius_um / step) + 1
    di, dj = np.mgrid[-ri : ri + 1, -rj : rj + 1]
    dx = dj * step
    if grid == "hex":
        dx = dx + 0.5 * step * (((parity + di) % 2) - parity)
    keep = dx**2 + (di * rs) ** 2 <= radius_um**2 + 1e-9
    return di[keep], dj[keep]


def _disk_points(ci: np.ndarray, cj: np.ndarray, radius_um: float, step: float, grid: str,
                 shape: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
    """Flat indices of the points within ``radius_um`` of each centre point, and whose centre each is."""
    ny, nx = shape
    flats, owners = [], []
    for parity in ((0, 1) if grid == "hex" else (0,)):
        sel = np.flatnonzero((ci % 2) == parity) if grid == "hex" else np.arange(ci.size)
        if sel.size == 0:
            continue
        di, dj = _disk_stencil(radius_um, step, grid, parity)
        ii = ci[sel, None] + di[None, :]
        jj = cj[sel, None] + dj[None, :]
        inside = (ii >= 0) & (ii < ny) & (jj >= 0) & (jj < nx)
        flats.append((ii * nx + jj)[inside])
        owners.append(np.broadcast_to(sel[:, None], ii.shape)[inside])
    if not flats:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    return np.concatenate(flats).astype(np.int64), np.concatenate(owners).astype(np.int64)


def _notch_mask(notch: NotchShape, side: str, position_um: float | None, shape: tuple[int, int], step: float,
                grid: str, width: float, height: float) -> tuple[np.ndarray, tuple[float, float], np.ndarray]:
    """Points inside the notch, its root ``(x, y)`` µm and its inward unit direction."""
    ny, nx = shape
    edge, normal, root = side_notch(side, position_um, notch, (0.0, width, 0.0, height))
    x, y = _grid_xy(np.arange(ny), nx, step, grid)
    return notch_mask(x, y, edge, normal, notch), (float(root[0]), float(root[1])), normal
