"""The crack path tracer of :mod:`slipnet.forecast._core` as one numba kernel (private).

:func:`trace_arrays` gives what ``_core._trace_all`` gives (the main path, branch 0, and the
breadth-first alternatives within the branch budget) as two arrays, one row per segment and one
per crossing, with the same numbers: the same plane choice and tie breaks (the first index of
``np.argmax``, the stable order of ``np.argsort``), the same 1e-9 µm tolerances and stop reasons,
and the products that decide a choice computed by the same BLAS calls (``np.dot`` in numba calls
the ``gemv`` that ``@`` calls in numpy, so |m′| rows agree to the bit). The kernel releases the
GIL, so the Monte Carlo's samples trace on several threads at once.

The kernel reads the crystal rows of a :class:`slipnet.forecast._geometry._Crystal` (computed in
one vectorised pass per sample); a path that walks into a grain whose row is not computed yet
returns, the row is computed and the trace starts again (the result does not depend on when a
row was computed). Full output arrays are grown and the trace run again the same way.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.columns import FORECAST_CROSSINGS
from slipnet.errors import ParameterError
from slipnet.forecast import _kernels as _k
from slipnet.forecast.barriers import _MAX_SCHMID

#: Columns of the segment array (the ``_core`` segment dict keys, in its order). ``plane`` is the
#: plane index (−1: stage II), ``stage`` 1 or 2, ``leg`` an index into :data:`LEGS`, ``end`` into
#: :data:`ENDS`.
SEG_COLUMNS: tuple[str, ...] = (
    "grain", "x0_um", "y0_um", "x1_um", "y1_um", "length_um", "s_start_um", "system", "plane",
    "effective_schmid", "stage", "direction_deg", "leg", "end", "branch",
)
#: Columns of the crossing array: :data:`slipnet.columns.FORECAST_CROSSINGS`. ``plane_out`` is the
#: plane index (−1: stage II), ``boundary_class`` an index into the geometry's class names.
CROSS_COLUMNS: tuple[str, ...] = FORECAST_CROSSINGS
#: Segment ends and stop reasons, by code.
ENDS: tuple[str, ...] = ("horizon", "leg", "boundary", "unindexed", "map_edge", "blocked")
#: Leg kinds, by code.
LEGS: tuple[str, ...] = ("trace", "zigzag", "stage2")

_SEG = {k: i for i, k in enumerate(SEG_COLUMNS)}
_CR = {k: i for i, k in enumerate(CROSS_COLUMNS)}
_NSEG = len(SEG_COLUMNS)
_NCR = len(CROSS_COLUMNS)
_C_BID, _C_GA, _C_GB, _C_X, _C_Y, _C_DIST = (_CR[k] for k in ("boundary_id", "grain_a", "grain_b", "x_um", "y_um",
                                                               "distance_um"))
_C_TWIST, _C_TILT, _C_MP, _C_SIN, _C_SOUT = (_CR[k] for k in ("twist_deg", "tilt_deg", "m_prime", "schmid_in",
                                                            "schmid_out"))
_C_SYSIN, _C_SYSOUT, _C_PLANE = _CR["system_in"], _CR["system_out"], _CR["plane_out"]
_C_CH = _CR["choice_schmid"]  # choice_schmid, choice_m_prime, choice_twist, choice_tilt, choice_score follow
_C_NCLOSE, _C_MIS, _C_CLS, _C_ANG, _C_BRANCH = (_CR[k] for k in ("n_close", "misorientation_deg", "boundary_class",
                                                                "trace_angle_deg", "branch"))
assert tuple(CROSS_COLUMNS[_C_CH:_C_CH + 5]) == ("choice_schmid", "choice_m_prime", "choice_twist", "choice_tilt",
                                                  "choice_score")

# kernel return codes
_OK, _NEED_GRAIN, _SEG_FULL, _CROSS_FULL, _NO_STAGE2 = 0, 1, 2, 3, 4
_END_HORIZON, _END_LEG, _END_BOUNDARY, _END_UNINDEXED, _END_EDGE, _END_BLOCKED = range(6)

#: Segments one path may have at most (a guard against a path that never progresses).
MAX_SEGMENTS = 20000
#: The message of the ParameterError raised when stage II has no in-plane load to follow.
NO_STAGE2 = ("stage II needs an in-plane load component, but load_axis is (nearly) along the surface normal; "
             "give stage2_after_um=None and stage2_min_schmid=None, or tilt the load")


@nb.njit(cache=True, nogil=True)
def _argmax_where(vals, ok):
    """``np.argmax(np.where(ok, vals, -inf))``: the first maximum, the first NaN if there is one."""
    bv = vals[0] if ok[0] else -math.inf
    if bv != bv:
        return 0
    bi = 0
    for i in range(1, vals.shape[0]):
        v = vals[i] if ok[i] else -math.inf
        if v != v:
            return i
        if v > bv:
            bv = v
            bi = i
    return bi


@nb.njit(cache=True, nogil=True)
def _nanmax(vals):
    """``np.max``: NaN if any value is NaN."""
    m = vals[0]
    for i in range(vals.shape[0]):
        v = vals[i]
        if v != v:
            return v
        if v > m:
            m = v
    return m


@nb.njit(cache=True, nogil=True)
def _less(a, b):
    # the order of np.sort: NaN after everything
    if a != a:
        return False
    if b != b:
        return True
    return a < b


@nb.njit(cache=True, nogil=True)
def _order_desc(score, order):
    """``np.argsort(-score, kind="stable")`` into ``order`` (a few dozen planes: insertion sort)."""
    n = score.shape[0]
    for i in range(n):
        order[i] = i
    for i in range(1, n):
        j = i
        while j > 0 and _less(-score[order[j]], -score[order[j - 1]]):
            tmp = order[j]
            order[j] = order[j - 1]
            order[j - 1] = tmp
            j -= 1


@nb.njit(cache=True, nogil=True)
def _zigzag_partner(plane_meff, trace_ok, trace, g, p, tol, cos5):
    """``_core._zigzag_partner``: the best other plane within ``tol`` of plane ``p``, trace ≥ 5° away; −1 if none."""
    if tol <= 0:
        return -1
    m = plane_meff[g]
    mp_ = m[p]
    dots = np.dot(trace[g], trace[g, p])  # the gemv of `trace[g] @ trace[g, p]`
    bi = -1
    bv = -math.inf
    for i in range(m.shape[0]):
        if i == p or not trace_ok[g, i]:
            continue
        mi = m[i]
        big = mi if mi >= mp_ else mp_  # np.maximum, NaN-propagating
        if mi != mi or mp_ != mp_:
            big = math.nan
        if not (abs(mi - mp_) <= tol * big):
            continue
        if not (abs(dots[i]) < cos5):
            continue
        if bi < 0 or mi > bv:
            bi = i
            bv = mi
    return bi


@nb.njit(cache=True, nogil=True)
def _sense(tx, ty, dref):
    # _core._sense: flip a trace to run with the reference direction
    t = np.empty(2)
    t[0] = tx
    t[1] = ty
    if np.dot(t, dref) >= 0.0:
        return tx, ty
    return -tx, -ty


@nb.njit(cache=True, nogil=True)
def _scores(n_s, d_s, plane_sys, plane_meff, plane_n, trace_ok, ga, sys_a, gb, ang, incl, w, div, max_schmid,
            mp, twist, tilt, t_s, t_tw, t_tl, score):
    """``_core._crossing_scores`` into the (P,) arrays: |m′|, twist, tilt, the choice terms and the score."""
    npl = plane_meff.shape[1]
    if sys_a >= 0:
        row = np.abs(np.dot(n_s[gb], n_s[ga, sys_a]) * np.dot(d_s[gb], d_s[ga, sys_a]))
        for i in range(npl):
            mp[i] = row[plane_sys[gb, i]]
        _k.plane_angles(n_s[ga, sys_a], plane_n[gb], ang, incl, twist, tilt)
    else:
        for i in range(npl):
            mp[i] = 1.0
            twist[i] = 0.0
            tilt[i] = 0.0
    for i in range(npl):
        s = plane_meff[gb, i] / max_schmid
        if s > 1.0:  # np.minimum(·, 1.0), NaN kept
            s = 1.0
        t_s[i] = s
        t_tw[i] = 1.0 - twist[i] / 90.0
        t_tl[i] = 1.0 - tilt[i] / 90.0
        v = (w[0] * s + w[1] * mp[i] + w[2] * t_tw[i] + w[3] * t_tl[i]) / div
        score[i] = v if trace_ok[gb, i] else -math.inf


@nb.njit(cache=True, nogil=True)
def _plane_row(out, bid, ga, gb, x, y, s, p, mp, twist, tilt, t_s, t_tw, t_tl, score, meff, plane_sys, plane_meff,
               sys_in):
    """``_core._crossing_row`` for plane ``p`` of the grain entered (without the boundary fields)."""
    out[_C_BID] = bid
    out[_C_GA] = ga
    out[_C_GB] = gb
    out[_C_X] = x
    out[_C_Y] = y
    out[_C_DIST] = s
    out[_C_TWIST] = twist[p]
    out[_C_TILT] = tilt[p]
    out[_C_MP] = mp[p]
    out[_C_SIN] = meff[ga, sys_in] if sys_in >= 0 else _nanmax(meff[ga])
    out[_C_SOUT] = plane_meff[gb, p]
    out[_C_SYSIN] = sys_in
    out[_C_SYSOUT] = plane_sys[gb, p]
    out[_C_PLANE] = p
    out[_C_CH] = t_s[p]
    out[_C_CH + 1] = mp[p]
    out[_C_CH + 2] = t_tw[p]
    out[_C_CH + 3] = t_tl[p]
    out[_C_CH + 4] = score[p]


@nb.njit(cache=True, nogil=True)
def _trace(labels, hexgrid, ox, oy, step, rs, ds, ecd, edge_code, edge_bid, edge_mis, edge_cls, edge_ang, code_base,
           cls_high, have, n_s, d_s, meff, plane_sys, plane_meff, plane_n, trace_ok, trace, best_sys, x_start, y_start,
           grain_start, dref, d2, has_d2, prm, w, seg, cross, states, info):
    """The tracer. ``prm``: horizon, stage2_after, stage2_min_schmid, zigzag_tol, zigzag_fraction, branch_tol,
    max_branches, inclination, max_gap, max_schmid, max_segments, cos 5°, weight divisor; ``w`` the four
    path weights. Returns (code, segments, crossings, states); ``info[0]`` the grain missing a row."""
    horizon, s2_after, s2_min, zz_tol, zz_frac, b_tol = prm[0], prm[1], prm[2], prm[3], prm[4], prm[5]
    max_br, incl, max_gap, max_schmid, max_seg, cos5, div = int(prm[6]), prm[7], prm[8], prm[9], int(prm[10]), \
        prm[11], prm[12]
    lim = horizon - 1e-9
    npl = plane_meff.shape[1]
    n_edges = edge_code.shape[0]
    mp = np.empty(npl)
    twist = np.empty(npl)
    tilt = np.empty(npl)
    t_s = np.empty(npl)
    t_tw = np.empty(npl)
    t_tl = np.empty(npl)
    score = np.empty(npl)
    order = np.empty(npl, np.int64)
    qx = np.empty(max_br + 1)
    qy = np.empty(max_br + 1)
    qs = np.empty(max_br + 1)
    qg = np.empty(max_br + 1, np.int64)
    qp = np.empty(max_br + 1, np.int64)
    qrow = np.empty((max_br + 1, cross.shape[1]))
    nq = 0
    budget = max_br
    n_seg = 0
    n_cross = 0
    x, y, grain, s, forced = x_start, y_start, grain_start, 0.0, -1
    si = 0
    states[0, 0] = 0
    states[0, 2] = 0
    legp = np.empty(2, np.int64)
    legx = np.empty(2)
    legy = np.empty(2)
    legl = np.empty(2)
    legk = np.empty(2, np.int64)
    while True:
        branch = si
        stage = 1
        stop = -1
        nseg = 0
        prev = -1
        while s < lim and nseg < max_seg:
            g = grain
            if not have[g]:
                info[0] = g
                return _NEED_GRAIN, n_seg, n_cross, si + 1
            if stage == 1:
                go2 = s >= s2_after
                if not go2:
                    mx = 0.0 if not trace_ok[g, 0] else plane_meff[g, 0]
                    for i in range(npl):  # np.max(np.where(trace_ok, plane_meff, 0.0)), NaN-propagating
                        v = plane_meff[g, i] if trace_ok[g, i] else 0.0
                        if v != v:
                            mx = v
                            break
                        if v > mx:
                            mx = v
                    go2 = mx < s2_min
                if go2:
                    if not has_d2:
                        return _NO_STAGE2, n_seg, n_cross, si + 1
                    stage = 2
            if stage == 2:
                nlegs = 1
                legp[0] = -1
                legx[0] = d2[0]
                legy[0] = d2[1]
                legl[0] = math.inf
                legk[0] = 2
            else:
                best = _argmax_where(plane_meff[g], trace_ok[g])
                p = forced if forced >= 0 else best
                partner = _zigzag_partner(plane_meff, trace_ok, trace, g, p, zz_tol, cos5)
                if partner >= 0:
                    a = zz_frac * ecd[g]
                    b = 2.0 * step
                    leg = b if b > a else a  # Python's max(a, b)
                    nlegs = 2
                    legp[0] = p
                    legp[1] = partner
                    legx[0], legy[0] = _sense(trace[g, p, 0], trace[g, p, 1], dref)
                    legx[1], legy[1] = _sense(trace[g, partner, 0], trace[g, partner, 1], dref)
                    legl[0] = leg
                    legl[1] = leg
                    legk[0] = 1
                    legk[1] = 1
                else:
                    nlegs = 1
                    legp[0] = p
                    legx[0], legy[0] = _sense(trace[g, p, 0], trace[g, p, 1], dref)
                    legl[0] = math.inf
                    legk[0] = 0
            forced = -1
            k = 0
            crossed = False
            while not crossed and s < lim and nseg < max_seg:
                j = k % nlegs
                p = legp[j]
                dx = legx[j]
                dy = legy[j]
                k += 1
                rest = horizon - s
                max_len = rest if rest < legl[j] else legl[j]  # Python's min(leg, rest)
                t, lab, status = _k.march_ray(labels, hexgrid, ox, oy, step, rs, x, y, dx, dy, g, ds, max_len,
                                              max_gap)
                sys_ = plane_sys[g, p] if p >= 0 else -1
                x1 = x + t * dx
                y1 = y + t * dy
                if status == _k.STATUS_INSIDE:
                    end = _END_HORIZON if s + t >= lim else _END_LEG
                elif status == _k.STATUS_GRAIN:
                    end = _END_BOUNDARY
                elif status == _k.STATUS_UNINDEXED:
                    end = _END_UNINDEXED
                else:
                    end = _END_EDGE
                if t > 1e-9:
                    if n_seg >= seg.shape[0]:
                        return _SEG_FULL, n_seg, n_cross, si + 1
                    r = seg[n_seg]
                    r[0] = g
                    r[1] = x
                    r[2] = y
                    r[3] = x1
                    r[4] = y1
                    r[5] = t
                    r[6] = s
                    r[7] = sys_
                    r[8] = p
                    r[9] = meff[g, sys_] if sys_ >= 0 else _nanmax(meff[g])
                    r[10] = stage
                    r[11] = math.degrees(math.atan2(dy, dx))
                    r[12] = legk[j]
                    r[13] = end
                    r[14] = branch
                    n_seg += 1
                    nseg += 1
                x = x1
                y = y1
                s = s + t
                if status == _k.STATUS_INSIDE:
                    if nlegs == 1 and s < lim and t <= 1e-9:
                        stop = _END_BLOCKED
                        break
                    continue
                if status == _k.STATUS_EDGE or status == _k.STATUS_UNINDEXED:
                    stop = end
                    break
                if lab == prev and t < 2.0 * step:
                    # the chosen trace leads straight back: deflected along the boundary
                    stop = _END_BLOCKED
                    break
                # --- the crossing into grain `lab` (_core._cross)
                lo = g if g < lab else lab
                hi = lab if g < lab else g
                code = lo * code_base + hi
                at = np.searchsorted(edge_code, code)
                if at < n_edges and edge_code[at] == code:
                    bid = edge_bid[at]
                    mis = edge_mis[at]
                    cls = edge_cls[at]
                    ang = edge_ang[at]
                    if not math.isfinite(ang):
                        ang = math.degrees(math.atan2(dx, -dy)) % 180.0
                else:  # not adjacent in the graph (met through a gap): a boundary ⟂ the path, high-angle
                    bid = -1
                    mis = math.nan
                    cls = cls_high
                    ang = math.degrees(math.atan2(dx, -dy)) % 180.0
                if not have[lab]:
                    info[0] = lab
                    return _NEED_GRAIN, n_seg, n_cross, si + 1
                if n_cross >= cross.shape[0]:
                    return _CROSS_FULL, n_seg, n_cross, si + 1
                row = cross[n_cross]
                if stage == 2:
                    sie = best_sys[g]
                    _scores(n_s, d_s, plane_sys, plane_meff, plane_n, trace_ok, g, -1, lab, ang, incl, w, div,
                            max_schmid, mp, twist, tilt, t_s, t_tw, t_tl, score)
                    mrow = np.abs(np.dot(n_s[lab], n_s[g, sie]) * np.dot(d_s[lab], d_s[g, sie]))
                    row[_C_BID] = bid
                    row[_C_GA] = g
                    row[_C_GB] = lab
                    row[_C_X] = x
                    row[_C_Y] = y
                    row[_C_DIST] = s
                    row[_C_TWIST] = 0.0
                    row[_C_TILT] = 0.0
                    row[_C_MP] = _nanmax(mrow)
                    row[_C_SIN] = meff[g, sie]
                    row[_C_SOUT] = _nanmax(meff[lab])
                    row[_C_SYSIN] = -1
                    row[_C_SYSOUT] = -1
                    row[_C_PLANE] = -1
                    for c in range(5):
                        row[_C_CH + c] = math.nan
                    row[_C_NCLOSE] = 0
                    forced = -1
                else:
                    _scores(n_s, d_s, plane_sys, plane_meff, plane_n, trace_ok, g, sys_, lab, ang, incl, w, div,
                            max_schmid, mp, twist, tilt, t_s, t_tw, t_tl, score)
                    _order_desc(score, order)
                    best = order[0]
                    floor = score[best] - b_tol
                    n_close = 0
                    for m in range(1, npl):
                        v = score[order[m]]
                        if math.isfinite(v) and v >= floor:
                            n_close += 1
                    for m in range(1, npl):
                        pc = order[m]
                        v = score[pc]
                        if not (math.isfinite(v) and v >= floor):
                            continue
                        if budget <= 0:
                            break
                        budget -= 1
                        qx[nq] = x
                        qy[nq] = y
                        qs[nq] = s
                        qg[nq] = lab
                        qp[nq] = pc
                        q = qrow[nq]
                        _plane_row(q, bid, g, lab, x, y, s, pc, mp, twist, tilt, t_s, t_tw, t_tl, score, meff,
                                   plane_sys, plane_meff, sys_)
                        q[_C_NCLOSE] = n_close
                        q[_C_MIS] = mis
                        q[_C_CLS] = cls
                        q[_C_ANG] = ang
                        nq += 1
                    _plane_row(row, bid, g, lab, x, y, s, best, mp, twist, tilt, t_s, t_tw, t_tl, score, meff,
                               plane_sys, plane_meff, sys_)
                    row[_C_NCLOSE] = n_close
                    forced = best
                row[_C_MIS] = mis
                row[_C_CLS] = cls
                row[_C_ANG] = ang
                row[_C_BRANCH] = branch
                n_cross += 1
                grain = lab
                prev = g
                crossed = True
            if stop >= 0 or s >= lim:
                break
        states[si, 1] = n_seg
        states[si, 3] = n_cross
        states[si, 4] = stop if stop >= 0 else _END_HORIZON
        if si >= nq:
            return _OK, n_seg, n_cross, si + 1
        # the next alternative, breadth-first: it starts with the crossing row that opened it
        x, y, s, grain, forced = qx[si], qy[si], qs[si], qg[si], qp[si]
        si += 1
        states[si, 0] = n_seg
        states[si, 2] = n_cross
        if n_cross >= cross.shape[0]:
            return _CROSS_FULL, n_seg, n_cross, si + 1
        cross[n_cross, :] = qrow[si - 1]
        cross[n_cross, _C_BRANCH] = si
        n_cross += 1


class Traced:
    """The result of :func:`trace_arrays`: segment and crossing rows of every state, in ``_trace_all`` order.

    ``seg`` is ``(n, len(SEG_COLUMNS))``, ``cross`` ``(m, len(CROSS_COLUMNS))``; ``states[k]`` holds the
    segment range, the crossing range and the stop code (into :data:`ENDS`) of branch ``k`` (0 = main).
    """

    def __init__(self, seg, cross, states, plane_labels, class_names) -> None:
        self.seg, self.cross, self.states = seg, cross, states
        self.plane_labels, self.class_names = plane_labels, class_names

    @property
    def main_stop(self) -> str:
        """Stop reason of the main path."""
        return ENDS[int(self.states[0, 4])]

    @property
    def n_main_crossings(self) -> int:
        """Crossings of the main path."""
        return int(self.states[0, 3] - self.states[0, 2])

    def main_length(self) -> float:
        """Length of the main path, µm, summed in segment order (as ``sum`` over the segment dicts)."""
        return float(sum(self.seg[self.states[0, 0]:self.states[0, 1], _SEG["length_um"]].tolist()))

    def main_end(self) -> tuple[float, float] | None:
        """End point of the main path's last segment, µm (None without segments)."""
        n = int(self.states[0, 1])
        if n == 0:
            return None
        return float(self.seg[n - 1, _SEG["x1_um"]]), float(self.seg[n - 1, _SEG["y1_um"]])

    def rank_rows(self) -> list[dict]:
        """The crossing rows :func:`slipnet.forecast._mc_arrays.rank_pairs` reads (numbers as floats)."""
        keys = ("grain_a", "grain_b", "branch", "distance_um", "twist_deg", "m_prime", "schmid_in", "schmid_out",
                "boundary_id")
        cols = [_CR[k] for k in keys]
        names = self.class_names
        ci = _C_CLS
        out = []
        for r in self.cross.tolist():  # tens of rows
            d = {k: r[c] for k, c in zip(keys, cols, strict=True)}
            d["boundary_class"] = names[int(r[ci])]
            out.append(d)
        return out

    def crossing_dicts(self) -> list[dict]:
        """The crossing rows as ``_trace_all`` makes them (``main.crossings + alt_cross``)."""
        ints = {"boundary_id", "grain_a", "grain_b", "system_in", "system_out", "n_close", "branch"}
        out = []
        for r in self.cross.tolist():
            d = {}
            for k, v in zip(CROSS_COLUMNS, r, strict=True):
                if k == "plane_out":
                    d[k] = self.plane_labels[int(v)] if v >= 0 else "stage II"
                elif k == "boundary_class":
                    d[k] = self.class_names[int(v)]
                else:
                    d[k] = int(v) if k in ints else v
            out.append(d)
        return out

    def segment_dicts(self, branch: int) -> list[dict]:
        """The segments of one state as ``_State.segments``."""
        a, b = int(self.states[branch, 0]), int(self.states[branch, 1])
        out = []
        for r in self.seg[a:b].tolist():
            d = dict(zip(SEG_COLUMNS, r, strict=True))
            for k in ("grain", "system", "branch"):
                d[k] = int(d[k])
            p = int(d["plane"])
            d["plane"] = self.plane_labels[p] if p >= 0 else "stage II"
            d["stage"] = "I" if d["stage"] == 1 else "II"
            d["leg"] = LEGS[int(d["leg"])]
            d["end"] = ENDS[int(d["end"])]
            out.append(d)
        return out


def trace_arrays(geo, cry, planes, x: float, y: float, grain: int, opts, *, seg_rows: int = 256,
                 cross_rows: int = 64) -> Traced:
    """The paths of ``_core._trace_all`` (main path and alternatives) from one kernel call.

    Parameters
    ----------
    geo : slipnet.forecast._geometry._Geometry
        Grid, labels and boundary look-up of the grain graph.
    cry : slipnet.forecast._geometry._Crystal
        The sample's crystal rows; rows the path needs and lacks are computed on the way.
    planes : slipnet.forecast._geometry._Planes
        The slip planes (labels of the planes in the rows).
    x, y : float
        Start point, µm (map frame).
    grain : int
        Grain the path starts in.
    opts : slipnet.forecast._core._Opts
        The tracer options (horizon and lengths in µm, angles in degrees).
    seg_rows, cross_rows : int
        First sizes of the output arrays (grown ×4 and the trace run again when full).

    Returns
    -------
    Traced
        Segment and crossing rows and the per-branch ranges and stop reasons.

    Raises
    ------
    ParameterError
        When the path turns to stage II but the load has no in-plane component.
    """
    e = geo.edge_arrays()
    pw = opts.pw
    wsum = pw.schmid + pw.m_prime + pw.twist + pw.tilt
    d2 = opts.d_stage2
    dref = np.ascontiguousarray(opts.d_ref, dtype=float)
    if d2 is not None:
        d2s = np.asarray(d2 if float(d2 @ opts.d_ref) >= 0.0 else -d2, dtype=float)  # _core._sense
    else:
        d2s = np.zeros(2)
    max_br = int(opts.max_branches)
    prm = np.array([opts.horizon, opts.stage2_after, opts.stage2_min_schmid, opts.zigzag_tol, opts.zigzag_fraction,
                    opts.branch_tol, max_br, opts.inclination, opts.max_gap, _MAX_SCHMID, MAX_SEGMENTS,
                    math.cos(math.radians(5.0)), wsum if wsum > 0 else 1.0], float)
    w = np.array([pw.schmid, pw.m_prime, pw.twist, pw.tilt], float)
    info = np.zeros(1, np.int64)
    cap_seg = MAX_SEGMENTS * (max_br + 1)
    while True:
        seg = np.empty((seg_rows, _NSEG))
        cross = np.empty((cross_rows, _NCR))
        states = np.zeros((max_br + 1, 5), np.int64)
        code, n_seg, n_cross, n_states = _trace(
            geo.labels, geo.hexgrid, float(geo.ox), float(geo.oy), geo.step, geo.rs, geo.ds, geo.ecd,
            e.code, e.bid, e.mis, e.cls, e.ang, e.base, e.cls_high,
            cry.have, cry.n_s, cry.d_s, cry.meff, cry.plane_sys, cry.plane_meff, cry.plane_n, cry.trace_ok, cry.trace,
            cry.best_sys, float(x), float(y), int(grain), dref, d2s, d2 is not None, prm, w, seg, cross, states, info)
        if code == _OK:
            return Traced(seg[:n_seg], cross[:n_cross], states[:n_states], planes.labels, e.names)
        if code == _NEED_GRAIN:
            cry.ensure1(int(info[0]))
        elif code == _SEG_FULL:
            seg_rows = min(4 * seg_rows, cap_seg)
        elif code == _CROSS_FULL:
            cross_rows *= 4
        else:
            raise ParameterError(NO_STAGE2)


@nb.njit(cache=True, nogil=True)
def crystal_rows(q, idx, sys_normals, sys_dirs, plane_normals, members, n_members, load, crss, crss_rev, schmid_in,
                 have_schmid, n_s, d_s, schmid, meff, plane_sys, plane_meff, plane_n, trace_ok, trace, best_sys, have):
    """The rows ``idx`` of a :class:`slipnet.forecast._geometry._Crystal`, written in place.

    The arithmetic of ``_Crystal``'s former numpy pass: the rotation matrix of each unit quaternion
    ``q[g]`` (w, x, y, z; v_crystal = g v_sample), the sample-frame normals and directions as one
    ``gemm`` of the catalogue with the matrices side by side (a gemm sums each length-3 product in
    order, as numpy's stacked ``matmul`` did, so the rows agree to the bit), the Schmid factors
    (``schmid_in[k]`` for row ``k`` when ``have_schmid``, else ``(n·l)(d·l)`` for the load axis
    ``l``, one ``gemv`` each), the effective factors ``|m| / CRSS`` (the reverse CRSS where m < 0),
    the best system of each plane (the first of its ``members`` at the maximum), the planes'
    surface traces (unusable within ~3° of the surface) and the best system. Releases the GIL.
    """
    npl = plane_normals.shape[0]
    ns = sys_normals.shape[0]
    nk = idx.shape[0]
    b = np.empty((3, 3 * nk))
    for k in range(nk):
        i = idx[k]
        w, x, y, z = q[i, 0], q[i, 1], q[i, 2], q[i, 3]
        c = 3 * k
        # _geometry._matrices, entry by entry in its order; b[:, 3k + j] = g_k[:, j]
        b[0, c] = 1 - 2 * (y * y + z * z)
        b[0, c + 1] = 2 * (x * y - w * z)
        b[0, c + 2] = 2 * (x * z + w * y)
        b[1, c] = 2 * (x * y + w * z)
        b[1, c + 1] = 1 - 2 * (x * x + z * z)
        b[1, c + 2] = 2 * (y * z - w * x)
        b[2, c] = 2 * (x * z - w * y)
        b[2, c + 1] = 2 * (y * z + w * x)
        b[2, c + 2] = 1 - 2 * (x * x + y * y)
    nall = np.dot(sys_normals, b)
    dall = np.dot(sys_dirs, b)
    pall = np.dot(plane_normals, b)
    nflat = np.empty((nk * ns, 3))
    dflat = np.empty((nk * ns, 3))
    for k in range(nk):
        i = idx[k]
        for s in range(ns):
            for j in range(3):
                nflat[k * ns + s, j] = nall[s, 3 * k + j]
                dflat[k * ns + s, j] = dall[s, 3 * k + j]
                n_s[i, s, j] = nall[s, 3 * k + j]
                d_s[i, s, j] = dall[s, 3 * k + j]
    if not have_schmid:
        sa = np.dot(nflat, load)
        sb = np.dot(dflat, load)
    ok_all = np.ones(ns, np.bool_)
    for k in range(nk):
        i = idx[k]
        for s in range(ns):
            m = schmid_in[k, s] if have_schmid else sa[k * ns + s] * sb[k * ns + s]
            schmid[i, s] = m
            meff[i, s] = abs(m) / (crss[s] if m >= 0 else crss_rev[s])
        best_sys[i] = _argmax_where(meff[i], ok_all)
        for p in range(npl):
            # np.argmax over the plane's members: the first maximum (the first NaN)
            bm = members[p, 0]
            bv = meff[i, bm]
            if bv == bv:
                for j in range(1, n_members[p]):
                    v = meff[i, members[p, j]]
                    if v != v:
                        bm = members[p, j]
                        break
                    if v > bv:
                        bv = v
                        bm = members[p, j]
            plane_sys[i, p] = bm
            plane_meff[i, p] = meff[i, bm]
            for j in range(3):
                plane_n[i, p, j] = pall[p, 3 * k + j]
            t0 = pall[p, 3 * k + 1]
            t1 = -pall[p, 3 * k]
            tn = math.sqrt(t0 * t0 + t1 * t1)
            ok = tn > 0.05
            trace_ok[i, p] = ok
            den = tn if ok else 1.0
            trace[i, p, 0] = t0 / den
            trace[i, p, 1] = t1 / den
        have[i] = True
