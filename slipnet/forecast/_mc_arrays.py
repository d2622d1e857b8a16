"""Array-only versions of the per-sample steps of the Monte Carlo (private to :mod:`slipnet.forecast`).

A Monte Carlo sample needs, of the barrier table, only which grain pairs the paths cross, which of
them lie on the main path, their rank and the top barrier: :func:`rank_pairs` (dict rows) and
:func:`rank_arrays` (one array per column) give those with the score of
:func:`slipnet.forecast.barriers.barrier_scores`, the formula :func:`~slipnet.forecast.barriers.rank_barriers`
uses, but without building a DataFrame per sample. :class:`BarrierPlan` holds what the barrier
features of the nominal barriers need that does not change between samples (positions, grains,
the nominal terms, the systems in and out), so a sample computes only the two drops and the
residual Burgers vectors, in one kernel. :class:`FieldPlan` does the same for the map-mode field:
the pair look-up of |m′| and the window's per-point constants are prepared once, the grain terms
of a sample are one kernel, and :meth:`FieldPlan.sample_peaks` computes the field only where the
sample reads it and finds the peaks tile by tile, skipping tiles whose bound lies below the peaks.
Every kernel here releases the GIL, so a sample's field runs whole on a worker thread.
"""

from __future__ import annotations

import math
import weakref

import numba as nb
import numpy as np

from slipnet.errors import ParameterError
from slipnet.forecast.barriers import _boundary_rows, _check_decay, _class_factor, barrier_scores
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
    cf = CLASS_FACTORS if class_factors is None else class_factors
    if len(rows) == 0:
        return rank_arrays(*(np.zeros(0),) * 10, weights, decay_length_um=decay_length_um)
    num = np.array([[r[k] for k in _RANK_KEYS] for r in rows], float)
    memo = {} if class_memo is None else class_memo
    cls = np.empty(len(rows))
    for m, r in enumerate(rows):  # per crossing: tens; the class names repeat, each looked up once
        c = r["boundary_class"]
        f = memo.get(c)
        if f is None:
            f = memo[c] = _class_factor(str(c), cf)
        cls[m] = f
    return rank_arrays(*num.T, cls, weights, decay_length_um=decay_length_um)


def rank_arrays(grain_a: np.ndarray, grain_b: np.ndarray, branch: np.ndarray, distance_um: np.ndarray,
                twist_deg: np.ndarray, m_prime: np.ndarray, schmid_in: np.ndarray, schmid_out: np.ndarray,
                boundary_id: np.ndarray, term_class: np.ndarray, weights: BarrierWeights | None = None, *,
                decay_length_um: float = np.inf) -> dict:
    """:func:`rank_pairs` of crossings given as one array per column (a tracer kernel's output).

    Parameters
    ----------
    grain_a, grain_b, branch, distance_um, twist_deg, m_prime, schmid_in, schmid_out, boundary_id
        One entry per crossing, as the columns of the crossing table (µm, degrees).
    term_class
        Per crossing, the class factor of its boundary class.
    weights, decay_length_um
        As :func:`slipnet.forecast.barriers.rank_barriers`.

    Returns
    -------
    dict
        As :func:`rank_pairs`.
    """
    w = weights or BarrierWeights()
    decay = _check_decay(decay_length_um)
    if np.size(grain_a) == 0:
        e = np.zeros(0, np.int64)
        return {"lo": e, "hi": e, "on_path": np.zeros(0, bool), "boundary_id": e, "barrier_score": np.zeros(0)}
    ga, gb = np.asarray(grain_a).astype(np.int64), np.asarray(grain_b).astype(np.int64)
    dist = np.asarray(distance_um, float)
    lo, hi, key, _, idx, on_path = _boundary_rows(ga, gb, np.asarray(branch).astype(np.int64), dist)
    d = dist[idx]
    score = barrier_scores(np.asarray(twist_deg, float)[idx], np.asarray(m_prime, float)[idx],
                           np.asarray(schmid_in, float)[idx], np.asarray(schmid_out, float)[idx],
                           np.asarray(term_class, float)[idx], d, w, decay)[4]
    rank = np.lexsort((d, -score))  # score descending, then distance; stable as the table's sort
    sel = idx[rank]
    return {"lo": lo[sel], "hi": hi[sel], "on_path": on_path[key[sel]],
            "boundary_id": np.asarray(boundary_id).astype(np.int64)[sel], "barrier_score": score[rank]}


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

        # the columns that do not change between samples, in BARRIER_FEATURES order, NaN-free once
        self.base = np.zeros((self.n, len(BARRIER_FEATURES)))
        for j, c in enumerate(BARRIER_FEATURES):
            if c in self.fixed:
                self.base[:, j] = np.nan_to_num(self.fixed[c])
        self.cols = np.array([BARRIER_FEATURES.index(c) for c in ("field_drop", "tau_drop", "residual_burgers")],
                             np.int64)

    def features(self, field: np.ndarray, tau: np.ndarray, labels: np.ndarray, solid: np.ndarray, x: np.ndarray,
                 y: np.ndarray, cry) -> np.ndarray:
        """The ``(n, k)`` barrier features of one sample.

        Parameters
        ----------
        field, tau, labels, solid, x, y : (ny, nx) ndarray
            The sample's window: field, τ, grain labels, metal mask and point positions (µm).
        cry
            The sample's crystal data (``_Crystal``: sample-frame slip directions, best systems).

        Returns
        -------
        (n, k) ndarray
            The columns of :data:`BARRIER_FEATURES`, NaN-free.
        """
        if self.n == 0:
            return np.zeros((0, len(BARRIER_FEATURES)))
        cry.ensure(np.concatenate([self.ga, self.gb]))
        ny, nx = labels.shape
        rs = float(y[1, 0] - y[0, 0]) if ny > 1 else 1.0
        st = float(x[0, 1] - x[0, 0]) if nx > 1 else 1.0
        out = self.base.copy()
        _barrier_columns(field, tau, labels, solid, x, y, float(y[0, 0]), float(x[0, 0]), rs, st, self.xs, self.ys,
                         self.ga, self.gb, self.radius, 3, self.have_sys, self.si, self.so, cry.best_sys, cry.d_s,
                         self.cols, out)
        return out


@nb.njit(cache=True, nogil=True)
def _barrier_columns(field, tau, lab, solid, x, y, y0, x0, rs, st, xs, ys, ga, gb, radius, min_points, have_sys, si, so,
                     best_sys, d_s, cols, out):
    """The per-sample columns of the barrier features: both drops and the residual Burgers vector.

    Writes ``out[:, cols]`` = (field drop, τ drop, residual Burgers) with ``np.nan_to_num``'s
    values for non-finite numbers; the residual is min(|d_a − d_b|, |d_a + d_b|) of the systems in
    and out (each grain's best system where the crossing gave none), 0 without systems. Any array
    layout (window views are read in place). Releases the GIL.
    """
    n = xs.shape[0]
    fd = np.empty(n)
    td = np.empty(n)
    _drops(field, tau, lab, solid, x, y, y0, x0, rs, st, xs, ys, ga, gb, radius, min_points, fd, td)
    big = 1.7976931348623157e308
    for i in range(n):
        rb = 0.0
        if have_sys:
            a, b = ga[i], gb[i]
            s_in = si[i] if si[i] >= 0 else best_sys[a]
            s_out = so[i] if so[i] >= 0 else best_sys[b]
            m2 = (d_s[a, s_in, 0] - d_s[b, s_out, 0]) ** 2 + (d_s[a, s_in, 1] - d_s[b, s_out, 1]) ** 2 \
                + (d_s[a, s_in, 2] - d_s[b, s_out, 2]) ** 2
            p2 = (d_s[a, s_in, 0] + d_s[b, s_out, 0]) ** 2 + (d_s[a, s_in, 1] + d_s[b, s_out, 1]) ** 2 \
                + (d_s[a, s_in, 2] + d_s[b, s_out, 2]) ** 2
            ra, rc = math.sqrt(m2), math.sqrt(p2)
            rb = math.nan if (math.isnan(ra) or math.isnan(rc)) else min(ra, rc)  # as np.minimum
        for j, v in enumerate((fd[i], td[i], rb)):
            if math.isnan(v):
                v = 0.0
            elif math.isinf(v):
                v = big if v > 0 else -big
            out[i, cols[j]] = v


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


#: Side of the square tiles (in points) of the lazy peak search: small enough that a tile's bound
#: on the field is close to its largest value, large enough that bounding the tiles costs little.
_TILE = 8


class FieldPlan:
    """A :class:`slipnet.forecast.features.MapFieldPlan` with the per-sample work cut to arrays.

    The pair look-up of |m′| (which directed pairs the window's points read, the grains they
    involve) is prepared once, the per-grain terms of the logit are summed per grain in one kernel
    (:func:`_grain_terms`) instead of per point, and one kernel pass gives the field, τ and the
    points within the horizon of the sample's tip (for the peak search) together. The field equals
    ``MapFieldPlan.sample`` to round-off (tested). :meth:`sample_peaks` computes the field where a
    sample reads it and finds the peaks tile by tile, skipping the tiles whose bound on the field
    lies below the peaks found (the same peaks as the full search, tested).
    """

    def __init__(self, plan) -> None:
        from slipnet.stress.constants import voigt_reuss_hill

        self.plan = plan
        p = plan
        self.normals = np.ascontiguousarray(np.asarray(p.systems.normals, float))
        self.directions = np.ascontiguousarray(np.asarray(p.systems.directions, float))
        self.crss = np.ascontiguousarray(np.asarray(p.systems.crss, float))
        self.crss_rev = np.ascontiguousarray(np.asarray(p.systems.crss_reverse, float))
        c = p.constants
        s = np.linalg.inv(np.array([[c.c11, c.c12, c.c12], [c.c12, c.c11, c.c12], [c.c12, c.c12, c.c11]]))
        self.s11, self.s12, self.s44 = float(s[0, 0]), float(s[0, 1]), 1.0 / c.c44
        self.e_hill = float(voigt_reuss_hill(c)["young_hill_gpa"])
        # the directed pairs whose |m′| the points read, in the plan's sorted order
        pairs = np.stack([p.ea, p.eb], axis=1).astype(np.int64).reshape(-1, 2)
        if pairs.size and p.keys.size:
            both = np.concatenate([pairs, pairs[:, ::-1]])
            code = both[:, 0] * (p.ng + 1) + both[:, 1]
            _, last = np.unique(code[::-1], return_index=True)
            keep = np.sort(code.size - 1 - last)
            sel = keep[p.order]
            self.pa, self.pb = both[sel, 0], both[sel, 1]
        else:
            self.pa = self.pb = np.zeros(0, np.int64)
        self.grains = np.unique(np.concatenate([p.used, self.pa, self.pb])).astype(np.int64)  # every grain read
        pos = np.full(p.ng, -1, np.int64)
        pos[self.grains] = np.arange(self.grains.size)
        self.at_used, self.at_a, self.at_b = pos[p.used], pos[self.pa], pos[self.pb]
        self.used = np.asarray(p.used, np.int64)
        self.cnt = np.bincount(p.lab_solid, minlength=p.ng).astype(float)
        self.ea = np.ascontiguousarray(p.ea, np.int64)
        self.eb = np.ascontiguousarray(p.eb, np.int64)
        self.ew = np.ascontiguousarray(p.ew, float)
        self._coefs: dict = {}
        self._need: tuple = (None, None)
        self._free: list = []  # output buffers no caller holds: (bytes, written points, their count)
        self._tiles = _tiles(p, _TILE)

    def _model_terms(self, model, replicate):
        """``(mean, scale, coef, intercept)`` in the kernel's feature order, for the replicate's weights."""
        from slipnet.forecast.features import FEATURES

        key = (id(model), replicate)
        got = self._coefs.get(key)
        if got is not None and got[0] is model:
            return got[1]
        c, b = model.coef, model.intercept
        if replicate is not None and model.bootstrap_coef.shape[0]:
            r = int(replicate) % model.bootstrap_coef.shape[0]
            c, b = model.bootstrap_coef[r], float(model.bootstrap_intercept[r])
        names = FEATURES["map"]
        mean7, scale7, coef7 = np.zeros(len(names)), np.ones(len(names)), np.zeros(len(names))
        for k, name in enumerate(model.features):  # seven names
            i = names.index(name)
            mean7[i], scale7[i], coef7[i] = model.mean[k], model.scale[k], c[k]
        terms = (mean7, scale7, coef7, float(b))
        self._coefs[key] = (model, terms)  # one entry per replicate; a dict write is atomic between threads
        return terms

    def _grain_part(self, mean_quats, load_axis, model, replicate):
        """The per-grain logit (grain terms summed), finite τ per grain, the pairs' |m′| and the model terms."""
        p = self.plan
        load = np.asarray(load_axis, float)
        load = load / np.linalg.norm(load)
        mean7, scale7, coef7, b = self._model_terms(model, replicate)
        grain_z, tau_f = np.empty(p.ng), np.empty(p.ng)
        mp_sorted = np.empty(max(self.pa.size, 1))
        _grain_terms(np.ascontiguousarray(mean_quats, float), load, self.grains, self.normals, self.directions,
                     self.crss, self.crss_rev, self.at_used, self.used, self.s11, self.s12, self.s44, self.e_hill,
                     self.cnt, self.ea, self.eb, self.ew, self.pa, self.at_a, self.at_b, mean7, scale7, coef7, b,
                     grain_z, tau_f, mp_sorted)
        return grain_z, tau_f, mp_sorted, mean7, scale7, coef7

    def sample(self, mean_quats, load_axis, tip, direction, model, replicate, horizon: float, need=None):
        """``(tau, field, peak_values, peak_x, peak_y)`` of one sample on the plan's window.

        ``tau`` and ``field`` are the window's ``(ny, nx)`` arrays; the ``peak_*`` arrays hold the
        metal points within ``horizon`` (µm) of ``tip``, in row-major order. With ``need`` (a flat
        bool mask of the window) the field and τ are computed only there and within the horizon
        (0 elsewhere): the points a sample reads.
        """
        p = self.plan
        grain_z, tau_f, mp_sorted, mean7, scale7, coef7 = self._grain_part(mean_quats, load_axis, model, replicate)
        d = np.asarray(direction, float) / np.linalg.norm(direction)
        n = p.lab.size
        fld, tau = np.empty(n), np.empty(n)
        pv, px, py = np.empty(n), np.empty(n), np.empty(n)
        if need is None:
            need = p.solid
        m = _mc_map_field(p.lab, p.solid, need, p.e_block, p.pair_pos, p.lnd, p.x, p.y, grain_z, tau_f, mp_sorted,
                          float(tip[0]), float(tip[1]), float(d[0]), float(d[1]), p.step, mean7, scale7, coef7,
                          float(horizon), fld, tau, pv, px, py)
        return tau.reshape(p.shape), fld.reshape(p.shape), pv[:m], px[:m], py[:m]

    def sample_peaks(self, mean_quats, load_axis, tip, direction, model, replicate, horizon: float, need, k: int,
                     separation_um: float):
        """``(tau, field, peaks)`` of one sample: the field where it is read and the peaks of the horizon.

        Parameters
        ----------
        mean_quats, load_axis, tip, direction, model, replicate, horizon
            As :meth:`sample` (tip in µm, horizon in µm).
        need : ndarray of bool or None
            Flat mask of the window's points whose field and τ the caller reads (None: every metal
            point).
        k
            Most peaks to find; 0 returns ``None`` for the peaks.
        separation_um
            Least distance between two peaks, µm.

        Returns
        -------
        tau, field : (ny, nx) ndarray
            τ and the field at the ``need`` points and at the points the peak search evaluated
            (0 elsewhere: only the ``need`` points are to be read). Both are views of a buffer the
            plan recycles once no view of it is left, so holding them is safe.
        peaks : (≤k, 2) ndarray or None
            The peaks (x, y) in µm: those of ``greedy_peaks`` over :meth:`sample`'s ``peak_*``
            points (``monte_carlo._peaks``), the highest first. A tile of the horizon is evaluated
            only while its upper bound on the field is not below the best point still allowed.
        """
        p = self.plan
        if not int(k) >= 0:
            raise ParameterError(f"k (the number of peaks) should be 0 or more; got {k}")
        grain_z, tau_f, mp_sorted, mean7, scale7, coef7 = self._grain_part(mean_quats, load_axis, model, replicate)
        d = np.asarray(direction, float) / np.linalg.norm(direction)
        n = p.lab.size
        obj, idx = self._need
        if obj is not need:
            idx = np.flatnonzero(p.solid if need is None else (np.asarray(need, bool) & p.solid)).astype(np.int64)
            self._need = (need, idx)
        # the two output arrays from a recycled buffer: fresh window-sized arrays cost more in page
        # faults than the kernel spends computing (the sample writes a few thousand scattered points)
        try:
            raw, written, prev = self._free.pop()
        except IndexError:  # none free: the first call, or every buffer still held by a caller
            raw, written, prev = bytearray(16 * n), np.empty(2 * n, np.int64), np.zeros(1, np.int64)
        root = np.frombuffer(raw, np.float64)
        fld, tau = root[:n], root[n:]
        out = np.zeros((max(int(k), 1), 2))
        t = self._tiles
        c = _field_and_peaks(p.lab, p.e_block, p.pair_pos, p.lnd, p.x, p.y, grain_z, tau_f, mp_sorted,
                             float(tip[0]), float(tip[1]), float(d[0]), float(d[1]), p.step, mean7, scale7, coef7,
                             float(horizon), idx, t["ptr"], t["pts"], t["box"], t["f6"], t["eb"], t["g_ptr"],
                             t["g_ids"], t["p_ptr"], t["p_ids"], int(k), float(separation_um) ** 2, fld, tau, out,
                             written, prev)
        # back to the free list once the caller holds no view of it (every view's base is ``root``;
        # list.append and list.pop are atomic between threads)
        weakref.finalize(root, self._free.append, (raw, written, prev))
        peaks = out[:c].copy() if k > 0 else None
        return tau.reshape(p.shape), fld.reshape(p.shape), peaks


def _tiles(p, size: int) -> dict:
    """The window's metal points in square tiles of ``size`` points, with what bounds the field on each.

    Per tile: its points (flat, row-major), the box of their positions (µm), the range of the
    notch-distance feature and of the boundary-distance factor, its grains and its |m′| pair slots
    (CSR arrays ``*_ptr``/``*_ids``). Array passes over the points, once per plan.
    """
    nx = p.shape[1]
    flat = np.flatnonzero(p.solid).astype(np.int64)
    rows, cols = flat // nx, flat % nx
    ntc = -(-nx // size)
    tile = (rows // size) * ntc + cols // size
    order = np.argsort(tile, kind="stable")  # by tile, row-major within a tile
    pts, tl = flat[order], tile[order]
    ids, start = np.unique(tl, return_index=True)
    nt = ids.size
    ptr = np.append(start, pts.size).astype(np.int64)

    def span(v):
        if nt == 0:
            return np.zeros((0, 2))
        return np.stack([np.minimum.reduceat(v, start), np.maximum.reduceat(v, start)], axis=1)

    f6 = p.lnd[pts]
    f6 = np.where(np.isfinite(f6), f6, 0.0)  # as the kernel takes a non-finite feature
    box = np.concatenate([span(p.x[pts]), span(p.y[pts])], axis=1) if nt else np.zeros((0, 4))
    slot = np.repeat(np.arange(nt), np.diff(ptr))

    def csr(vals, base):
        code = np.unique(slot * base + vals)
        t_of = code // base
        return np.searchsorted(t_of, np.arange(nt + 1)).astype(np.int64), (code % base).astype(np.int64)

    g_ptr, g_ids = csr(p.lab[pts], int(p.ng) + 1)
    pp = p.pair_pos[pts]
    big = int(pp.max()) + 2 if pp.size else 1
    p_ptr, p_ids = csr(pp + 1, big)  # slot 0 stands for 'no pair' (|m′| = 1)
    return {"ptr": ptr, "pts": pts, "box": np.ascontiguousarray(box), "f6": np.ascontiguousarray(span(f6)),
            "eb": np.ascontiguousarray(span(p.e_block[pts])), "g_ptr": g_ptr, "g_ids": g_ids, "p_ptr": p_ptr,
            "p_ids": p_ids - 1}


@nb.njit(cache=True, nogil=True)
def _grain_terms(mean_quats, load, grains, normals, directions, crss, crss_rev, at_used, used, s11, s12, s44, e_hill,
                 cnt, ea, eb, ew, pa, at_a, at_b, mean, scale, coef, b, grain_z, tau_f, mp_sorted):
    """The grain part of a sample's map-mode logit, in one pass over the grains it reads. Releases the GIL.

    For the grains of the window (``used``): the resolved shear over the CRSS of each system
    scaled by the directional Young's modulus ratio, its maximum τ_g and the best system; the
    excess of τ_g over the edge-weighted mean of the neighbours; the |m′| of each read pair (best
    system of the first grain against every system of the second). Writes ``grain_z`` =
    ``b + Σ (f − mean)/scale·coef`` over τ_g, the modulus ratio and the excess (every grain),
    ``tau_f`` (τ_g, 0 off the window) and ``mp_sorted``: the arithmetic of ``FieldPlan``'s numpy
    version, product by product.
    """
    ng = grain_z.shape[0]
    ngr = grains.shape[0]
    ns = normals.shape[0]
    gm = np.empty((ngr, 3, 3))
    n_s = np.empty((ngr, ns, 3))
    d_s = np.empty((ngr, ns, 3))
    for i in range(ngr):
        q = mean_quats[grains[i]]
        w, x, y, z = q[0], q[1], q[2], q[3]
        if not (math.isfinite(w) and math.isfinite(x) and math.isfinite(y) and math.isfinite(z)):
            w, x, y, z = 1.0, 0.0, 0.0, 0.0
        gm[i, 0, 0] = 1 - 2 * (y * y + z * z)
        gm[i, 0, 1] = 2 * (x * y - w * z)
        gm[i, 0, 2] = 2 * (x * z + w * y)
        gm[i, 1, 0] = 2 * (x * y + w * z)
        gm[i, 1, 1] = 1 - 2 * (x * x + z * z)
        gm[i, 1, 2] = 2 * (y * z - w * x)
        gm[i, 2, 0] = 2 * (x * z - w * y)
        gm[i, 2, 1] = 2 * (y * z + w * x)
        gm[i, 2, 2] = 1 - 2 * (x * x + y * y)
        for s in range(ns):
            for j in range(3):
                n_s[i, s, j] = normals[s, 0] * gm[i, 0, j] + normals[s, 1] * gm[i, 1, j] + normals[s, 2] * gm[i, 2, j]
                d_s[i, s, j] = (directions[s, 0] * gm[i, 0, j] + directions[s, 1] * gm[i, 1, j]
                                + directions[s, 2] * gm[i, 2, j])
    tau_g = np.zeros(ng)
    eratio = np.zeros(ng)
    best = np.zeros(ng, np.int64)
    l0, l1, l2 = load[0], load[1], load[2]
    for u in range(used.shape[0]):
        i = at_used[u]
        g = used[u]
        c0 = gm[i, 0, 0] * l0 + gm[i, 0, 1] * l1 + gm[i, 0, 2] * l2
        c1 = gm[i, 1, 0] * l0 + gm[i, 1, 1] * l1 + gm[i, 1, 2] * l2
        c2 = gm[i, 2, 0] * l0 + gm[i, 2, 1] * l1 + gm[i, 2, 2] * l2
        jj = c0 ** 2 * c1 ** 2 + c1 ** 2 * c2 ** 2 + c2 ** 2 * c0 ** 2
        er = 1.0 / (s11 - 2.0 * (s11 - s12 - 0.5 * s44) * jj) / e_hill
        eratio[g] = er
        top = -math.inf
        bs = 0
        for s in range(ns):
            ts = ((n_s[i, s, 0] * l0 + n_s[i, s, 1] * l1 + n_s[i, s, 2] * l2)
                  * (d_s[i, s, 0] * l0 + d_s[i, s, 1] * l1 + d_s[i, s, 2] * l2))
            tu = abs(ts) / (crss[s] if ts >= 0 else crss_rev[s]) * er
            if tu > top:  # the first of equal maxima, as argmax
                top = tu
                bs = s
        tau_g[g] = top
        best[g] = bs
    # the neighbours' edge-weighted mean of τ_g over the grains with metal on the crop, summed in
    # edge order as the two bincounts of _neighbour_mean_edges
    tg = np.empty(ng)
    for g in range(ng):
        tg[g] = tau_g[g] if cnt[g] > 0 else np.nan
    num_a = np.zeros(ng)
    num_b = np.zeros(ng)
    den_a = np.zeros(ng)
    den_b = np.zeros(ng)
    for e in range(ea.shape[0]):
        a, c = ea[e], eb[e]
        if a >= ng or c >= ng:
            continue
        va, vb = tg[c], tg[a]
        fa, fb = math.isfinite(va), math.isfinite(vb)
        wa = ew[e] * (1.0 if fa else 0.0)
        wb = ew[e] * (1.0 if fb else 0.0)
        num_a[a] += wa * (va if fa else 0.0)
        den_a[a] += wa
        num_b[c] += wb * (vb if fb else 0.0)
        den_b[c] += wb
    for g in range(ng):
        ex = 0.0
        if ea.shape[0] > 0:
            den = den_a[g] + den_b[g]
            if den > 0:
                ex = tg[g] - (num_a[g] + num_b[g]) / max(den, 1e-12)
                if math.isnan(ex):
                    ex = 0.0
                elif math.isinf(ex):
                    ex = 1.7976931348623157e308 if ex > 0 else -1.7976931348623157e308
        z = b
        for k in range(3):
            v = tau_g[g] if k == 0 else (eratio[g] if k == 1 else ex)
            if not math.isfinite(v):
                v = 0.0
            z += (v - mean[k]) / scale[k] * coef[k]
        grain_z[g] = z
        tau_f[g] = tau_g[g] if math.isfinite(tau_g[g]) else 0.0
    if pa.shape[0] == 0:
        mp_sorted[0] = 1.0
    for m in range(pa.shape[0]):
        ia, ib = at_a[m], at_b[m]
        sa = best[pa[m]]
        n0, n1, n2 = n_s[ia, sa, 0], n_s[ia, sa, 1], n_s[ia, sa, 2]
        e0, e1, e2 = d_s[ia, sa, 0], d_s[ia, sa, 1], d_s[ia, sa, 2]
        top = -math.inf
        for s in range(ns):
            v = abs((n_s[ib, s, 0] * n0 + n_s[ib, s, 1] * n1 + n_s[ib, s, 2] * n2)
                    * (d_s[ib, s, 0] * e0 + d_s[ib, s, 1] * e1 + d_s[ib, s, 2] * e2))
            if v > top:
                top = v
        mp_sorted[m] = top


@nb.njit(cache=True, nogil=True, inline="always")
def _inside(r2, dx, dy, h2, horizon):
    # the region of the peak search: the same test as np.hypot(...) <= horizon, hypot only near the edge
    inside = r2 < h2 * (1.0 - 1e-12)
    if not inside and r2 <= h2 * (1.0 + 1e-12):
        inside = math.hypot(dx, dy) <= horizon
    return inside


@nb.njit(cache=True, nogil=True, inline="always")
def _value(p, dx, dy, r2, lab, e_block, pair_pos, lnd, grain_z, mp_sorted, d0, d1, step, inv_step, mean, a3, a4, a5,
           a6):
    """The field at point ``p`` (offset ``dx, dy`` from the tip, µm): the one formula of both kernels."""
    g = lab[p]
    mp = mp_sorted[pair_pos[p]] if pair_pos[p] >= 0 else 1.0
    r = math.sqrt(r2)
    u = dx * d0 + dy * d1
    v = dx * d1 * -1.0 + dy * d0
    # cos²(θ/2)·(1 + 3 sin²(θ/2)) = cos²(θ/2) + ¾ sin²θ, cos²(θ/2) in the form that keeps its
    # digits on either side of the tip (r + u computed as v²/(r − u) where it cancels)
    if r == 0.0:
        shape = 1.0
    else:
        inv_r = 1.0 / r
        ch2 = 0.5 * (r + u) * inv_r if u >= 0.0 else 0.5 * v * v * inv_r / (r - u)
        shape = ch2 + 0.75 * v * v * inv_r * inv_r
    f3 = (1.0 - mp) * e_block[p]
    f4 = math.sqrt(shape * step / (r + step))
    f5 = math.log1p(r * inv_step)
    f6 = lnd[p]
    if not math.isfinite(f3):
        f3 = 0.0
    if not math.isfinite(f6):
        f6 = 0.0
    z = grain_z[g] + (f3 - mean[3]) * a3 + (f4 - mean[4]) * a4 + (f5 - mean[5]) * a5 + (f6 - mean[6]) * a6
    z = min(max(z, -40.0), 40.0)
    return 1.0 / (1.0 + math.exp(-z))


@nb.njit(cache=True, nogil=True)
def _mc_map_field(lab, solid, need, e_block, pair_pos, lnd, x, y, grain_z, tau_g, mp_sorted, tx, ty, d0, d1, step, mean,
                  scale, coef, horizon, fld, tau_out, pv, px, py):
    """:func:`slipnet.forecast._kernels.map_field` with the grain terms summed beforehand (``grain_z``).

    Also writes the metal points within ``horizon`` of the tip (as ``np.hypot(...) <= horizon``
    decides) into ``pv, px, py`` in row-major order and returns their number. Points beyond the
    horizon are computed only where ``need`` is set (0 elsewhere). Releases the GIL.
    """
    h2 = horizon * horizon
    # (f − mean)/scale·coef as (f − mean)·a: multiplications, the divisions taken out of the loop
    a3, a4, a5, a6 = coef[3] / scale[3], coef[4] / scale[4], coef[5] / scale[5], coef[6] / scale[6]
    inv_step = 1.0 / step
    m = 0
    for p in range(lab.shape[0]):
        if not solid[p]:
            fld[p] = 0.0
            tau_out[p] = 0.0
            continue
        dx = x[p] - tx
        dy = y[p] - ty
        r2 = dx * dx + dy * dy
        inside = _inside(r2, dx, dy, h2, horizon)
        if not inside and not need[p]:
            fld[p] = 0.0
            tau_out[p] = 0.0
            continue
        val = _value(p, dx, dy, r2, lab, e_block, pair_pos, lnd, grain_z, mp_sorted, d0, d1, step, inv_step, mean,
                     a3, a4, a5, a6)
        fld[p] = val
        tau_out[p] = tau_g[lab[p]]
        if inside:
            pv[m] = val
            px[m] = x[p]
            py[m] = y[p]
            m += 1
    return m


@nb.njit(cache=True, nogil=True)
def _shape_bound(box, tx, ty, d0, d1, rmin):
    """An upper bound of the tip-shape factor cos²(θ/2) + ¾ sin²θ over a box seen from the tip.

    As a function of c = cos θ the factor (1 + c)/2 + ¾(1 − c²) is concave with its maximum 4/3 at
    c = 1/3. From a tip outside the box the box spans an arc below π: c there lies between its
    corners' values, or reaches 1 (−1) if the ray θ = 0 (θ = π) from the tip meets the box. Small
    margins cover round-off.
    """
    if not rmin > 0.0:
        return 4.0 / 3.0 + 1e-9
    c_lo = math.inf
    c_hi = -math.inf
    for m in range(4):
        dx = (box[0] if m % 2 == 0 else box[1]) - tx
        dy = (box[2] if m < 2 else box[3]) - ty
        c = (dx * d0 + dy * d1) / math.sqrt(dx * dx + dy * dy)
        c_lo = min(c_lo, c)
        c_hi = max(c_hi, c)
    if _ray_meets(box, tx, ty, d0, d1):
        c_hi = 1.0
    if _ray_meets(box, tx, ty, -d0, -d1):
        c_lo = -1.0
    c = min(max(1.0 / 3.0, c_lo - 1e-9), c_hi + 1e-9)
    return 0.5 * (1.0 + c) + 0.75 * (1.0 - c * c) + 1e-9


@nb.njit(cache=True, nogil=True, inline="always")
def _ray_meets(box, tx, ty, ux, uy):
    # slab test of the ray tip + t·u (t ≥ 0) against the box widened by a hair
    t0 = 0.0
    t1 = math.inf
    for lo, hi, o, u in ((box[0] - 1e-9, box[1] + 1e-9, tx, ux), (box[2] - 1e-9, box[3] + 1e-9, ty, uy)):
        if u == 0.0:
            if o < lo or o > hi:
                return False
        else:
            a = (lo - o) / u
            b = (hi - o) / u
            t0 = max(t0, min(a, b))
            t1 = min(t1, max(a, b))
    return t0 <= t1


@nb.njit(cache=True, nogil=True, inline="always")
def _sift(heap, key, i, n):
    # restore the max-heap below position i (heap holds indices into key)
    while True:
        c = 2 * i + 1
        if c >= n:
            return
        if c + 1 < n and key[heap[c + 1]] > key[heap[c]]:
            c += 1
        if not key[heap[c]] > key[heap[i]]:
            return
        heap[i], heap[c] = heap[c], heap[i]
        i = c


@nb.njit(cache=True, nogil=True)
def _field_and_peaks(lab, e_block, pair_pos, lnd, x, y, grain_z, tau_g, mp_sorted, tx, ty, d0, d1, step, mean, scale,
                     coef, horizon, need_idx, t_ptr, t_pts, t_box, t_f6, t_eb, g_ptr, g_ids, p_ptr, p_ids, k, sep2,
                     fld, tau_out, out, written, n_written):
    """The field and τ at ``need_idx``, and the greedy peaks of the horizon evaluated tile by tile.

    The peaks are those of :func:`slipnet.forecast._kernels.greedy_peaks` over every metal point
    within ``horizon`` of the tip: each round takes the highest point at least √sep2 from the peaks
    before it (the first in row-major order among equal values). A tile's field is bounded above
    from its grains' logit, its pairs' |m′|, its range of distances to the tip and of the notch
    feature (with a margin far above round-off), and tiles are evaluated in decreasing bound only
    while the bound is not below the best allowed point so far: a tile never evaluated holds no
    point that could have been chosen. Writes ``out[:n]`` = (x, y); returns n. ``written[:n_written[0]]``
    lists the points ``fld`` and ``tau_out`` hold values at: set back to 0 first (a recycled buffer),
    then the points of this call. Releases the GIL.
    """
    h2 = horizon * horizon
    a3, a4, a5, a6 = coef[3] / scale[3], coef[4] / scale[4], coef[5] / scale[5], coef[6] / scale[6]
    inv_step = 1.0 / step
    for q in range(n_written[0]):  # a recycled buffer: the points its last sample wrote back to 0
        fld[written[q]] = 0.0
        tau_out[written[q]] = 0.0
    nw = 0
    for q in range(need_idx.shape[0]):
        p = need_idx[q]
        dx = x[p] - tx
        dy = y[p] - ty
        fld[p] = _value(p, dx, dy, dx * dx + dy * dy, lab, e_block, pair_pos, lnd, grain_z, mp_sorted, d0, d1, step,
                        inv_step, mean, a3, a4, a5, a6)
        tau_out[p] = tau_g[lab[p]]
        written[nw] = p
        nw += 1
    n_written[0] = nw
    if k <= 0:
        return 0
    nt = t_box.shape[0]
    ub = np.empty(nt)
    live = np.empty(nt, np.int64)
    nl = 0
    reach = horizon * (1.0 + 1e-9) + 1e-9
    for t in range(nt):
        ddx = max(t_box[t, 0] - tx, 0.0, tx - t_box[t, 1])
        ddy = max(t_box[t, 2] - ty, 0.0, ty - t_box[t, 3])
        rmin = math.sqrt(ddx * ddx + ddy * ddy)
        if rmin > reach:
            continue  # no point of the tile within the horizon
        fx = max(abs(t_box[t, 0] - tx), abs(t_box[t, 1] - tx))
        fy = max(abs(t_box[t, 2] - ty), abs(t_box[t, 3] - ty))
        rmax = math.sqrt(fx * fx + fy * fy)
        zg = -math.inf
        for j in range(g_ptr[t], g_ptr[t + 1]):
            zg = max(zg, grain_z[g_ids[j]])
        lo3 = math.inf
        hi3 = -math.inf
        for j in range(p_ptr[t], p_ptr[t + 1]):
            cm = 1.0 - mp_sorted[p_ids[j]] if p_ids[j] >= 0 else 0.0  # no pair: |m′| = 1, the term is 0
            for e in (t_eb[t, 0], t_eb[t, 1]):
                v = cm * e
                if not math.isfinite(v):
                    v = 0.0  # as the point formula takes a non-finite term
                lo3 = min(lo3, v)
                hi3 = max(hi3, v)
        f4 = math.sqrt(_shape_bound(t_box[t], tx, ty, d0, d1, rmin) * step / (rmin + step))
        z = (zg + max((lo3 - mean[3]) * a3, (hi3 - mean[3]) * a3)
             + max((0.0 - mean[4]) * a4, (f4 - mean[4]) * a4)
             + max((math.log1p(rmin * inv_step) - mean[5]) * a5, (math.log1p(rmax * inv_step) - mean[5]) * a5)
             + max((t_f6[t, 0] - mean[6]) * a6, (t_f6[t, 1] - mean[6]) * a6))
        z += 1e-9 * (1.0 + abs(z))  # far above the round-off of the point formula
        z = min(max(z, -40.0), 40.0)
        ub[nl] = 1.0 / (1.0 + math.exp(-z)) * (1.0 + 1e-12)
        live[nl] = t
        nl += 1
    heap = np.arange(nl)  # the tiles by decreasing bound, popped one at a time (few are)
    for i in range(nl // 2 - 1, -1, -1):
        _sift(heap, ub, i, nl)
    nh = nl
    n_pts = 0
    for j in range(nl):
        n_pts += t_ptr[live[j] + 1] - t_ptr[live[j]]
    ev_v = np.empty(n_pts)
    ev_i = np.empty(n_pts, np.int64)
    m = 0  # evaluated points still allowed (at least √sep2 from every peak taken)
    count = 0
    while count < k:
        bi = -1
        bv = -math.inf
        for e in range(m):
            v = ev_v[e]
            if bi < 0 or v > bv or (v == bv and ev_i[e] < ev_i[bi]):
                bi = e
                bv = v
        while nh > 0 and (bi < 0 or ub[heap[0]] >= bv):
            t = live[heap[0]]
            nh -= 1
            heap[0] = heap[nh]
            _sift(heap, ub, 0, nh)
            for q in range(t_ptr[t], t_ptr[t + 1]):
                p = t_pts[q]
                dx = x[p] - tx
                dy = y[p] - ty
                r2 = dx * dx + dy * dy
                if not _inside(r2, dx, dy, h2, horizon):
                    continue
                ok = True
                for c in range(count):
                    ex = x[p] - out[c, 0]
                    ey = y[p] - out[c, 1]
                    if not ex * ex + ey * ey >= sep2:
                        ok = False
                        break
                if not ok:
                    continue  # a peak taken already excludes it: its value is not needed
                val = _value(p, dx, dy, r2, lab, e_block, pair_pos, lnd, grain_z, mp_sorted, d0, d1, step, inv_step,
                             mean, a3, a4, a5, a6)
                fld[p] = val
                tau_out[p] = tau_g[lab[p]]
                written[n_written[0]] = p  # at most once per tile point: within the 2n of the buffer
                n_written[0] += 1
                ev_v[m] = val
                ev_i[m] = p
                if bi < 0 or val > bv or (val == bv and p < ev_i[bi]):
                    bi = m
                    bv = val
                m += 1
        if bi < 0:
            break
        pk = ev_i[bi]
        out[count, 0] = x[pk]
        out[count, 1] = y[pk]
        count += 1
        # keep only the evaluated points the new peak still allows
        w = 0
        for e in range(m):
            ex = x[ev_i[e]] - x[pk]
            ey = y[ev_i[e]] - y[pk]
            if ex * ex + ey * ey >= sep2:
                ev_v[w] = ev_v[e]
                ev_i[w] = ev_i[e]
                w += 1
        m = w
    return count
