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


class FieldPlan:
    """A :class:`slipnet.forecast.features.MapFieldPlan` with the per-sample work cut to arrays.

    The pair look-up of |m′| (which directed pairs the window's points read, the grains they
    involve) is prepared once, the per-grain terms of the logit are summed per grain instead of
    per point, and one kernel pass gives the field, τ and the points within the horizon of the
    sample's tip (for the peak search) together. The field equals ``MapFieldPlan.sample`` to
    round-off (tested).
    """

    def __init__(self, plan) -> None:
        from slipnet.stress.constants import voigt_reuss_hill

        self.plan = plan
        p = plan
        self.normals = np.ascontiguousarray(np.asarray(p.systems.normals, float))
        self.directions = np.ascontiguousarray(np.asarray(p.systems.directions, float))
        self.crss = np.asarray(p.systems.crss, float)
        self.crss_rev = np.asarray(p.systems.crss_reverse, float)
        c = p.constants
        s = np.linalg.inv(np.array([[c.c11, c.c12, c.c12], [c.c12, c.c11, c.c12], [c.c12, c.c12, c.c11]]))
        self.s11, self.s12, self.s44 = s[0, 0], s[0, 1], 1.0 / c.c44
        self.e_hill = voigt_reuss_hill(c)["young_hill_gpa"]
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
        self.grains = np.unique(np.concatenate([p.used, self.pa, self.pb]))  # every grain a sample reads
        pos = np.full(p.ng, -1, np.int64)
        pos[self.grains] = np.arange(self.grains.size)
        self.at_used, self.at_a, self.at_b = pos[p.used], pos[self.pa], pos[self.pb]
        self.cnt = np.bincount(p.lab_solid, minlength=p.ng).astype(float)

    def sample(self, mean_quats, load_axis, tip, direction, model, replicate, horizon: float, need=None):
        """``(tau, field, peak_values, peak_x, peak_y)`` of one sample on the plan's window.

        ``tau`` and ``field`` are the window's ``(ny, nx)`` arrays; the ``peak_*`` arrays hold the
        metal points within ``horizon`` (µm) of ``tip``, in row-major order. With ``need`` (a flat
        bool mask of the window) the field and τ are computed only there and within the horizon
        (0 elsewhere): the points a sample reads.
        """
        from slipnet.forecast._geometry import _matrices
        from slipnet.forecast.features import FEATURES, _neighbour_mean_edges

        p = self.plan
        load = np.asarray(load_axis, float)
        load = load / np.linalg.norm(load)
        mq = np.asarray(mean_quats, float)[self.grains]
        q = np.where(np.all(np.isfinite(mq), axis=1)[:, None], mq, [1.0, 0.0, 0.0, 0.0])
        g = _matrices(q)
        n_s = np.matmul(self.normals[None], g)
        d_s = np.matmul(self.directions[None], g)
        u = self.at_used
        tau_s = (n_s[u] @ load) * (d_s[u] @ load)
        lc = g[u] @ load
        jj = lc[:, 0] ** 2 * lc[:, 1] ** 2 + lc[:, 1] ** 2 * lc[:, 2] ** 2 + lc[:, 2] ** 2 * lc[:, 0] ** 2
        eratio = np.zeros(p.ng)
        eratio[p.used] = 1.0 / (self.s11 - 2.0 * (self.s11 - self.s12 - 0.5 * self.s44) * jj) / self.e_hill
        # the grain terms of the grains on the window only (the others are 0, their best system 0)
        tau_u = np.abs(tau_s) / np.where(tau_s >= 0, self.crss, self.crss_rev) * eratio[p.used, None]
        tau_g = np.zeros(p.ng)
        tau_g[p.used] = tau_u.max(axis=1)
        tg = np.where(self.cnt > 0, tau_g, np.nan)
        excess = np.nan_to_num(tg - _neighbour_mean_edges(p.ea, p.eb, p.ew, tg))
        if self.pa.size:
            best = np.zeros(p.ng, np.int64)
            best[p.used] = np.argmax(tau_u, axis=1)
            sa = best[self.pa]
            na = n_s[self.at_a, sa]
            da = d_s[self.at_a, sa]
            mp_sorted = np.abs(np.matmul(n_s[self.at_b], na[:, :, None])[..., 0]
                               * np.matmul(d_s[self.at_b], da[:, :, None])[..., 0]).max(axis=1)
        else:
            mp_sorted = np.ones(1)
        c, b = model.coef, model.intercept
        if replicate is not None and model.bootstrap_coef.shape[0]:
            r = int(replicate) % model.bootstrap_coef.shape[0]
            c, b = model.bootstrap_coef[r], float(model.bootstrap_intercept[r])
        names = FEATURES["map"]
        mean7, scale7, coef7 = np.zeros(len(names)), np.ones(len(names)), np.zeros(len(names))
        for k, name in enumerate(model.features):
            i = names.index(name)
            mean7[i], scale7[i], coef7[i] = model.mean[k], model.scale[k], c[k]
        grain_z = np.full(p.ng, float(b))
        for i, v in enumerate((tau_g, eratio, excess)):  # the per-grain features, in the kernel's form
            grain_z += (np.where(np.isfinite(v), v, 0.0) - mean7[i]) / scale7[i] * coef7[i]
        d = np.asarray(direction, float) / np.linalg.norm(direction)
        n = p.lab.size
        fld, tau = np.empty(n), np.empty(n)
        pv, px, py = np.empty(n), np.empty(n), np.empty(n)
        if need is None:
            need = p.solid
        m = _mc_map_field(p.lab, p.solid, need, p.e_block, p.pair_pos, p.lnd, p.x, p.y, grain_z,
                          np.where(np.isfinite(tau_g), tau_g, 0.0), mp_sorted, float(tip[0]), float(tip[1]),
                          float(d[0]), float(d[1]), p.step, mean7, scale7, coef7, float(horizon), fld, tau, pv, px, py)
        return tau.reshape(p.shape), fld.reshape(p.shape), pv[:m], px[:m], py[:m]


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
        # the region of the peak search: the same test as np.hypot(...) <= horizon, hypot only near the edge
        inside = r2 < h2 * (1.0 - 1e-12)
        if not inside and r2 <= h2 * (1.0 + 1e-12):
            inside = math.hypot(dx, dy) <= horizon
        if not inside and not need[p]:
            fld[p] = 0.0
            tau_out[p] = 0.0
            continue
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
        val = 1.0 / (1.0 + math.exp(-z))
        fld[p] = val
        tau_out[p] = tau_g[g]
        if inside:
            pv[m] = val
            px[m] = x[p]
            py[m] = y[p]
            m += 1
    return m
