"""Array-only versions of the per-sample steps of the Monte Carlo (private to :mod:`slipnet.forecast`).

A Monte Carlo sample needs, of the barrier table, only which grain pairs the paths cross, which of
them lie on the main path, their rank and the top barrier: :func:`rank_pairs` gives those from the
tracer's crossing rows with the arithmetic of :func:`slipnet.forecast.barriers.rank_barriers` (the
same numbers, tested equal) but without building a DataFrame per sample. :class:`BarrierPlan`
holds what the barrier features of the nominal barriers need that does not change between samples
(positions, grains, the nominal terms, the systems in and out), so a sample computes only the two
drops and the residual Burgers vectors. :class:`FieldPlan` does the same for the map-mode field:
the pair look-up of |m′| and the window's per-point constants are prepared once.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.forecast.barriers import _MAX_SCHMID, _check_decay, _class_factor
from slipnet.forecast.predictor import BARRIER_FEATURES
from slipnet.forecast.types import CLASS_FACTORS, BarrierWeights

_RANK_KEYS = ("grain_a", "grain_b", "branch", "distance_um", "twist_deg", "m_prime", "schmid_in", "schmid_out",
              "boundary_id")


def rank_pairs(rows: list[dict], weights: BarrierWeights | None = None, *, decay_length_um: float = np.inf,
               class_factors: dict[str, float] | None = None, class_memo: dict | None = None) -> dict:
    """The barrier ranking of crossing rows as arrays, in rank order (rank 1 first).

    Parameters
    ----------
    rows
        Crossing rows as the path tracer makes them (dicts with ``grain_a``, ``grain_b``,
        ``branch``, ``distance_um`` (µm), ``twist_deg`` (degrees), ``m_prime``, ``schmid_in``,
        ``schmid_out``, ``boundary_class`` and ``boundary_id``).
    weights, decay_length_um, class_factors
        As :func:`slipnet.forecast.barriers.rank_barriers`.
    class_memo
        Optional dict caching the class factor per class name between calls.

    Returns
    -------
    dict
        ``lo``, ``hi`` (the unordered grain pair, int64), ``on_path`` (bool), ``boundary_id``
        (int64) and ``barrier_score`` of each barrier, sorted as the rows of ``rank_barriers``.
    """
    w = weights or BarrierWeights()
    cf = CLASS_FACTORS if class_factors is None else class_factors
    decay = _check_decay(decay_length_um)
    n = len(rows)
    if n == 0:
        e = np.zeros(0, np.int64)
        return {"lo": e, "hi": e, "on_path": np.zeros(0, bool), "boundary_id": e, "barrier_score": np.zeros(0)}
    num = np.array([[r[k] for k in _RANK_KEYS] for r in rows], float)
    ga, gb, branch = num[:, 0].astype(np.int64), num[:, 1].astype(np.int64), num[:, 2].astype(np.int64)
    dist = num[:, 3]
    lo, hi = np.minimum(ga, gb), np.maximum(ga, gb)
    _, key = np.unique((lo - lo.min()) * (hi.max() - hi.min() + 1) + (hi - hi.min()), return_inverse=True)
    key = key.reshape(-1)
    n_keys = int(key.max()) + 1
    order = np.lexsort((dist, branch))
    _, first_pos = np.unique(key[order], return_index=True)
    idx = order[np.sort(first_pos)]
    on_path = np.zeros(n_keys, dtype=bool)
    on_path[key[branch == 0]] = True
    memo = {} if class_memo is None else class_memo
    cls = np.empty(idx.size)
    for m, i in enumerate(idx):  # per barrier: tens
        c = rows[i]["boundary_class"]
        f = memo.get(c)
        if f is None:
            f = memo[c] = _class_factor(str(c), cf)
        cls[m] = f
    d = dist[idx]
    t_twist = np.clip(num[idx, 4] / 90.0, 0.0, 1.0)
    t_trans = np.clip(1.0 - num[idx, 5], 0.0, 1.0)
    t_drop = np.clip((num[idx, 6] - num[idx, 7]) / _MAX_SCHMID, 0.0, 1.0)
    wsum = w.twist + w.transmission + w.boundary_class + w.schmid_drop
    raw = (w.twist * t_twist + w.transmission * t_trans + w.boundary_class * cls + w.schmid_drop * t_drop) / wsum
    score = np.exp(-d / decay) * raw
    rank = np.lexsort((d, -score))  # score descending, then distance; stable as the table's sort
    sel = idx[rank]
    return {"lo": lo[sel], "hi": hi[sel], "on_path": on_path[key[sel]], "boundary_id": num[sel, 8].astype(np.int64),
            "barrier_score": score[rank]}


class BarrierPlan:
    """The barrier features of a forecast's nominal barriers, for many samples.

    Everything of :func:`slipnet.forecast.localise.barrier_features` that depends on the nominal
    barrier and crossing tables only (positions, grains, the barrier terms, the systems in and out
    of each barrier's first crossing) is read once; :meth:`features` then takes a sample's field,
    τ and crystal data. The numbers equal ``barrier_features`` to round-off.
    """

    def __init__(self, barriers, crossings, geo, drop_radius_um: float) -> None:
        self.n = len(barriers)
        self.xs = barriers["x_um"].to_numpy(float)
        self.ys = barriers["y_um"].to_numpy(float)
        self.ga = barriers["grain_a"].to_numpy(np.int64)
        self.gb = barriers["grain_b"].to_numpy(np.int64)
        self.radius = float(drop_radius_um)
        si = np.full(self.n, -1, np.int64)
        so = np.full(self.n, -1, np.int64)
        self.have_sys = crossings is not None and len(crossings) > 0 and {"system_in", "system_out"} <= set(
            crossings.columns)
        if self.have_sys:
            key: dict = {}
            for a, b, s_in, s_out in zip(crossings["grain_a"], crossings["grain_b"], crossings["system_in"],
                                         crossings["system_out"], strict=True):
                key.setdefault((int(a), int(b)), (int(s_in), int(s_out)))
            for m, (a, b) in enumerate(zip(self.ga, self.gb, strict=True)):
                si[m], so[m] = key.get((int(a), int(b)), (-1, -1))
        self.si, self.so = si, so
        self.fixed = {
            "untransmitted": np.clip(1.0 - barriers["m_prime"].to_numpy(float), 0.0, 1.0),
            "twist": np.clip(barriers["twist_deg"].to_numpy(float) / 90.0, 0.0, 1.0),
            "schmid_drop": barriers["term_schmid_drop"].to_numpy(float),
            "boundary_class": barriers["term_class"].to_numpy(float),
            "log_distance": np.log1p(barriers["distance_um"].to_numpy(float) / geo.step),
        }

    def features(self, field: np.ndarray, tau: np.ndarray, labels: np.ndarray, solid: np.ndarray, x: np.ndarray,
                 y: np.ndarray, cry) -> np.ndarray:
        """The ``(n, k)`` barrier features of one sample (window arrays ``field``, ``tau``, ``labels``, …)."""
        if self.n == 0:
            return np.zeros((0, len(BARRIER_FEATURES)))
        cry.ensure(np.concatenate([self.ga, self.gb]))
        ny, nx = labels.shape
        rs = float(y[1, 0] - y[0, 0]) if ny > 1 else 1.0
        st = float(x[0, 1] - x[0, 0]) if nx > 1 else 1.0
        fd = np.empty(self.n)
        td = np.empty(self.n)
        _drops(np.ascontiguousarray(field, float), np.ascontiguousarray(tau, float),
               np.ascontiguousarray(labels, np.int64), np.ascontiguousarray(solid, np.bool_),
               np.ascontiguousarray(x, float), np.ascontiguousarray(y, float), float(y[0, 0]), float(x[0, 0]), rs, st,
               self.xs, self.ys, self.ga, self.gb, self.radius, 3, fd, td)
        rb = np.zeros(self.n)
        if self.have_sys:
            si = np.where(self.si >= 0, self.si, cry.best_sys[self.ga])
            so = np.where(self.so >= 0, self.so, cry.best_sys[self.gb])
            da, db = cry.d_s[self.ga, si], cry.d_s[self.gb, so]
            rb = np.minimum(np.sqrt(np.sum((da - db) ** 2, axis=1)), np.sqrt(np.sum((da + db) ** 2, axis=1)))
        cols = {"field_drop": np.nan_to_num(fd), "tau_drop": np.nan_to_num(td), "residual_burgers": rb, **self.fixed}
        return np.nan_to_num(np.stack([cols[c] for c in BARRIER_FEATURES], axis=1))


@nb.njit(cache=True, nogil=True)
def _drops(field, tau, lab, solid, x, y, y0, x0, rs, st, xs, ys, ga, gb, radius, min_points, fd, td):
    """:func:`slipnet.forecast.features.boundary_drops` of ``field`` and ``tau`` at once (NaN where undefined)."""
    ny, nx = lab.shape
    r2 = radius * radius
    for i in range(xs.shape[0]):
        cx, cy, a, b = xs[i], ys[i], ga[i], gb[i]
        r0 = max(0, math.floor((cy - radius - y0) / rs) - 1)
        r1 = min(ny, math.ceil((cy + radius - y0) / rs) + 2)
        c0 = max(0, math.floor((cx - radius - x0) / st) - 1)
        c1 = min(nx, math.ceil((cx + radius - x0) / st) + 2)
        na = 0
        nb_ = 0
        fa = 0.0
        fb = 0.0
        ta = 0.0
        tb = 0.0
        for r in range(r0, r1):
            for c in range(c0, c1):
                if not solid[r, c]:
                    continue
                dx = x[r, c] - cx
                dy = y[r, c] - cy
                if not dx * dx + dy * dy <= r2:
                    continue
                g = lab[r, c]
                if g == a:
                    na += 1
                    fa += field[r, c]
                    ta += tau[r, c]
                elif g == b:
                    nb_ += 1
                    fb += field[r, c]
                    tb += tau[r, c]
        fd[i] = np.nan
        td[i] = np.nan
        if na < min_points or nb_ < min_points:
            continue
        va, vb = fa / na, fb / nb_
        if abs(va) + abs(vb) > 0:
            fd[i] = (va - vb) / (abs(va) + abs(vb))
        va, vb = ta / na, tb / nb_
        if abs(va) + abs(vb) > 0:
            td[i] = (va - vb) / (abs(va) + abs(vb))
