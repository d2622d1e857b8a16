"""Internals of the crack forecast: the path march, plane choice at boundaries, tip parsing.

Public entry and documentation: :mod:`slipnet.forecast`. Geometry is in ``_geometry``, sites and
the field in ``_sites``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from slipnet._checks import check_choice, check_positive, check_range, check_vector
from slipnet.errors import ParameterError
from slipnet.forecast import _kernels as _k
from slipnet.forecast._geometry import _boundary_info, _Crystal, _Geometry, _Planes
from slipnet.forecast._trace_kernel import MAX_SEGMENTS, NO_STAGE2
from slipnet.forecast.barriers import _MAX_SCHMID

if TYPE_CHECKING:
    from slipnet.forecast.types import PathWeights

_MAX_SEGMENTS = MAX_SEGMENTS  # guard against a path that never progresses (shared with the kernel)

# ---------------------------------------------------------------------------------------------
# geometry of crossings








# ---------------------------------------------------------------------------------------------
# precomputed inputs




















# ---------------------------------------------------------------------------------------------
# path tracing


@dataclass
class _Opts:
    horizon: float
    d_ref: np.ndarray
    d_stage2: np.ndarray | None
    stage2_after: float
    stage2_min_schmid: float
    zigzag_tol: float
    zigzag_fraction: float
    branch_tol: float
    max_branches: int
    inclination: float
    max_gap: float
    pw: PathWeights


@dataclass
class _State:
    x: float
    y: float
    grain: int
    s: float
    branch: int
    forced_plane: int = -1
    incoming_sys: int = -1
    stage: str = "I"
    segments: list = field(default_factory=list)
    crossings: list = field(default_factory=list)
    stop: str = ""


def _choose_plane(cry: _Crystal, g: int) -> int:
    return int(np.argmax(np.where(cry.trace_ok[g], cry.plane_meff[g], -np.inf)))


def _zigzag_partner(cry: _Crystal, g: int, p: int, tol: float) -> int:
    """Best other plane whose factor is within ``tol`` (relative) of plane ``p``'s, trace ≥ 5° away; −1 if none."""
    if tol <= 0:
        return -1
    m = cry.plane_meff[g]
    # close = within tol of each other, relative to the larger of the two factors
    ok = (cry.trace_ok[g] & (np.abs(m - m[p]) <= tol * np.maximum(m, m[p]))
          & (np.abs(cry.trace[g] @ cry.trace[g, p]) < math.cos(math.radians(5.0))))
    ok[p] = False
    if not ok.any():
        return -1
    return int(np.argmax(np.where(ok, cry.plane_meff[g], -np.inf)))


def _sense(t: np.ndarray, d_ref: np.ndarray) -> np.ndarray:
    return t if float(t @ d_ref) >= 0.0 else -t


def _crossing_scores(cry: _Crystal, planes: _Planes, ga: int, sys_a: int, gb: int, trace_angle: float,
                     opts: _Opts) -> dict[str, np.ndarray]:
    """Choice-score terms for every plane of the grain entered, (P,) arrays."""
    pw = opts.pw
    psys = cry.plane_sys[gb]
    meff = cry.plane_meff[gb]
    if sys_a >= 0:
        mp = cry.m_prime_row(ga, sys_a, gb)[psys]
        n_in = cry.n_s[ga, sys_a]
        # crack_plane_angles for one boundary in one kernel (the same angles to round-off, ~1e-14°)
        twist = np.empty(meff.shape[0])
        tilt = np.empty(meff.shape[0])
        _k.plane_angles(np.ascontiguousarray(n_in), np.ascontiguousarray(cry.plane_n[gb]), float(trace_angle),
                        float(opts.inclination), twist, tilt)
    else:
        mp = np.ones_like(meff)
        twist = np.zeros_like(meff)
        tilt = np.zeros_like(meff)
    terms = {
        "schmid": np.minimum(meff / _MAX_SCHMID, 1.0),
        "m_prime": mp,
        "twist": 1.0 - twist / 90.0,
        "tilt": 1.0 - tilt / 90.0,
    }
    wsum = pw.schmid + pw.m_prime + pw.twist + pw.tilt
    score = (pw.schmid * terms["schmid"] + pw.m_prime * terms["m_prime"] + pw.twist * terms["twist"]
             + pw.tilt * terms["tilt"]) / (wsum if wsum > 0 else 1.0)
    score = np.where(cry.trace_ok[gb], score, -np.inf)
    return {"score": score, "m_prime": mp, "twist": twist, "tilt": tilt, "meff": meff, **{
        f"choice_{k}": v for k, v in terms.items()}}


def _run_state(geo: _Geometry, cry: _Crystal, planes: _Planes, st: _State, opts: _Opts,
               queue: list, budget: list) -> _State:
    """Advance one path until it stops; alternatives found on the way are pushed on ``queue``."""
    nseg = 0
    prev_grain = -1
    while st.s < opts.horizon - 1e-9 and nseg < _MAX_SEGMENTS:
        g = st.grain
        cry.ensure1(g)
        if st.stage == "I" and (st.s >= opts.stage2_after or float(np.max(
                np.where(cry.trace_ok[g], cry.plane_meff[g], 0.0))) < opts.stage2_min_schmid):
            if opts.d_stage2 is None:
                raise ParameterError(NO_STAGE2)
            st.stage = "II"
        if st.stage == "II":
            legs = [(-1, _sense(opts.d_stage2, opts.d_ref), np.inf, "stage2")]
        else:
            best = _choose_plane(cry, g)
            p = st.forced_plane if st.forced_plane >= 0 else best
            partner = _zigzag_partner(cry, g, p, opts.zigzag_tol)
            if partner >= 0:
                leg = max(opts.zigzag_fraction * geo.ecd[g], 2.0 * geo.step)
                legs = [(p, _sense(cry.trace[g, p], opts.d_ref), leg, "zigzag"),
                        (partner, _sense(cry.trace[g, partner], opts.d_ref), leg, "zigzag")]
            else:
                legs = [(p, _sense(cry.trace[g, p], opts.d_ref), np.inf, "trace")]
        st.forced_plane = -1
        k = 0
        crossed = False
        while not crossed and st.s < opts.horizon - 1e-9 and nseg < _MAX_SEGMENTS:
            p, d, leg_len, kind = legs[k % len(legs)]
            k += 1
            max_len = min(leg_len, opts.horizon - st.s)
            t, lab, status = geo.march(st.x, st.y, d, g, max_len, opts.max_gap)
            sys_ = int(cry.plane_sys[g, p]) if p >= 0 else -1
            x1, y1 = st.x + t * d[0], st.y + t * d[1]
            end = {0: "horizon" if st.s + t >= opts.horizon - 1e-9 else "leg", 1: "boundary",
                   2: "unindexed", 3: "map_edge"}[status]
            if t > 1e-9:
                st.segments.append({
                    "grain": g, "x0_um": st.x, "y0_um": st.y, "x1_um": x1, "y1_um": y1, "length_um": t,
                    "s_start_um": st.s, "system": sys_, "plane": planes.labels[p] if p >= 0 else "stage II",
                    "effective_schmid": float(cry.meff[g, sys_]) if sys_ >= 0 else float(np.max(cry.meff[g])),
                    "stage": st.stage, "direction_deg": math.degrees(math.atan2(d[1], d[0])),
                    "leg": kind, "end": end, "branch": st.branch,
                })
                nseg += 1
            st.x, st.y, st.s = x1, y1, st.s + t
            if status == _k.STATUS_INSIDE:
                if len(legs) == 1 and st.s < opts.horizon - 1e-9 and t <= 1e-9:
                    st.stop = "blocked"
                    return st
                continue
            if status in (_k.STATUS_EDGE, _k.STATUS_UNINDEXED):
                st.stop = end
                return st
            # entered grain ``lab``
            if lab == prev_grain and t < 2.0 * geo.step:
                # the chosen trace leads straight back: the crack is deflected along the boundary
                st.stop = "blocked"
                return st
            _cross(geo, cry, planes, st, g, lab, sys_, d, opts, queue, budget)
            prev_grain = g
            crossed = True
        if st.s >= opts.horizon - 1e-9:
            break
    st.stop = st.stop or "horizon"
    return st


def _cross(geo, cry, planes, st: _State, g: int, lab: int, sys_in: int, d: np.ndarray, opts: _Opts,
           queue: list, budget: list) -> None:
    bid, mis, cls, ang = _boundary_info(geo, g, lab, d)
    cry.ensure1(lab)
    if st.stage == "II":
        sys_in_eff = int(cry.best_sys[g])
        sc = _crossing_scores(cry, planes, g, -1, lab, ang, opts)
        mp_best = float(np.max(cry.m_prime_row(g, sys_in_eff, lab)))
        best = int(np.argmax(sc["score"]))
        row = {"grain_a": g, "grain_b": lab, "x_um": st.x, "y_um": st.y, "distance_um": st.s, "system_in": -1,
               "twist_deg": 0.0, "tilt_deg": 0.0, "m_prime": mp_best,
               "schmid_in": float(cry.meff[g, sys_in_eff]), "schmid_out": float(np.max(cry.meff[lab])),
               "system_out": -1, "plane_out": "stage II", "n_close": 0}
        row.update({k: float("nan") for k in ("choice_schmid", "choice_m_prime", "choice_twist", "choice_tilt",
                                                "choice_score")})
    else:
        sc = _crossing_scores(cry, planes, g, sys_in, lab, ang, opts)
        order = np.argsort(-sc["score"], kind="stable")
        best = int(order[0])
        rest = order[1:]
        sr = sc["score"][rest]
        close = rest[np.isfinite(sr) & (sr >= sc["score"][best] - opts.branch_tol)].tolist()
        for p in close:
            if budget[0] <= 0:
                break
            budget[0] -= 1
            alt = _State(x=st.x, y=st.y, grain=lab, s=st.s, branch=-1, forced_plane=p,
                         incoming_sys=int(cry.plane_sys[lab, p]), stage="I")
            queue.append((alt, {**_crossing_row(bid, g, lab, st, sc, p, cry, sys_in, planes), "n_close": len(close),
                                "boundary_id": bid, "misorientation_deg": mis, "boundary_class": cls,
                                "trace_angle_deg": ang}))
        row = _crossing_row(bid, g, lab, st, sc, best, cry, sys_in, planes)
        row["n_close"] = len(close)
    row.update({"boundary_id": bid, "misorientation_deg": mis, "boundary_class": cls, "trace_angle_deg": ang})
    st.crossings.append({**row, "branch": st.branch})
    st.forced_plane = best if st.stage == "I" else -1
    st.incoming_sys = int(cry.plane_sys[lab, best]) if st.stage == "I" else -1
    st.grain = lab


def _crossing_row(bid, g, lab, st, sc, p, cry, sys_in, planes) -> dict:
    return {
        "boundary_id": bid, "grain_a": g, "grain_b": lab, "x_um": st.x, "y_um": st.y, "distance_um": st.s,
        "twist_deg": float(sc["twist"][p]), "tilt_deg": float(sc["tilt"][p]), "m_prime": float(sc["m_prime"][p]),
        "schmid_in": float(cry.meff[g, sys_in]) if sys_in >= 0 else float(np.max(cry.meff[g])),
        "schmid_out": float(sc["meff"][p]), "system_in": int(sys_in), "system_out": int(cry.plane_sys[lab, p]),
        "plane_out": planes.labels[p],
        **{k: float(sc[k][p]) for k in ("choice_schmid", "choice_m_prime", "choice_twist", "choice_tilt")},
        "choice_score": float(sc["score"][p]),
    }


def _trace_all(geo, cry, planes, x, y, grain, opts: _Opts) -> tuple[list[_State], list[dict]]:
    """Main path (branch 0) and up to ``max_branches`` alternatives, breadth-first."""
    budget = [int(opts.max_branches)]
    queue: list = []
    main = _run_state(geo, cry, planes, _State(x=x, y=y, grain=grain, s=0.0, branch=0), opts, queue, budget)
    states = [main]
    alt_cross = []
    i = 0
    while i < len(queue):
        alt, row = queue[i]
        i += 1
        alt.branch = len(states)
        alt.crossings.append({**row, "branch": alt.branch})
        states.append(_run_state(geo, cry, planes, alt, opts, queue, budget))
        alt_cross.extend(alt.crossings)
    return states, alt_cross


# ---------------------------------------------------------------------------------------------
# localisation sites








# ---------------------------------------------------------------------------------------------
# public entry


def _parse_tip(geo: _Geometry, tip, direction) -> tuple[np.ndarray, np.ndarray, float]:
    t = np.asarray(tip, dtype=float)
    crack_len = 0.0
    if t.ndim == 2 and t.shape[1] == 2 and t.shape[0] >= 2:
        seg = np.diff(t, axis=0)
        crack_len = float(np.linalg.norm(seg, axis=1).sum())
        if direction is None:
            direction = seg[-1]
        t = t[-1]
    if t.shape != (2,) or not np.all(np.isfinite(t)):
        raise ParameterError(f"tip should be (x, y) in µm or a (k, 2) crack polyline with k ≥ 2; got {tip!r}")
    if direction is None:
        raise ParameterError("direction should be a 2-vector (x, y) in the map frame when tip is a single point")
    d = check_vector(direction, "direction", 2)
    return t, d, crack_len


def _start_grain(geo: _Geometry, tip: np.ndarray, d: np.ndarray) -> int:
    lab = geo.label_at(tip[0], tip[1])
    if lab == -2:
        ex = (geo.ox, geo.ox + (geo.nx - 1) * geo.step, geo.oy, geo.oy + (geo.ny - 1) * geo.rs)
        raise ParameterError(
            f"tip ({tip[0]:g}, {tip[1]:g}) µm lies outside the map; it should lie within "
            f"x {ex[0]:g}..{ex[1]:g}, y {ex[2]:g}..{ex[3]:g} µm"
        )
    ahead = geo.label_at(tip[0] + 0.5 * geo.step * d[0], tip[1] + 0.5 * geo.step * d[1])
    # a tip on a boundary starts in the grain it faces (half a step ahead)
    if ahead >= 0:
        return ahead
    if lab < 0:
        raise ParameterError(
            f"tip ({tip[0]:g}, {tip[1]:g}) µm lies on an unindexed point (no grain); move it into a grain "
            "or rebuild the graph with fill_unindexed=True"
        )
    return lab


def _make_opts(horizon, d, load, *, stage2_after_um, stage2_min_schmid, zigzag_tol, zigzag_step_fraction,
               branch_tol, max_branches, boundary_inclination_deg, unindexed, unindexed_gap_um, path_weights) -> _Opts:
    lxy = np.asarray(load[:2], dtype=float)
    n = float(np.linalg.norm(lxy))
    # the crack plane in stage II is normal to the load; its surface trace is ⟂ the in-plane load
    d2 = np.array([-lxy[1], lxy[0]]) / n if n > 1e-3 else None
    return _Opts(
        horizon=horizon, d_ref=d, d_stage2=d2,
        stage2_after=np.inf if stage2_after_um is None else check_positive(stage2_after_um, "stage2_after_um",
                                                                               allow_zero=True),
        stage2_min_schmid=-1.0 if stage2_min_schmid is None else check_range(stage2_min_schmid,
                                                                               "stage2_min_schmid", 0.0, 10.0),
        zigzag_tol=check_range(zigzag_tol, "zigzag_tol", 0.0, 1.0),
        zigzag_fraction=check_positive(zigzag_step_fraction, "zigzag_step_fraction"),
        branch_tol=check_range(branch_tol, "branch_tol", 0.0, 1.0),
        max_branches=int(check_range(max_branches, "max_branches", 0, 100)),
        inclination=check_range(boundary_inclination_deg, "boundary_inclination_deg", 1.0, 179.0),
        max_gap=np.inf if check_choice(unindexed, "unindexed", ("stop", "cross")) == "cross" else unindexed_gap_um,
        pw=path_weights,
    )


def _distance_to_segments(px: np.ndarray, py: np.ndarray, segs: np.ndarray) -> np.ndarray:
    """Distance (µm) of each point to the nearest of the segments ``(k, 4)`` = x0, y0, x1, y1."""
    ax, ay, bx, by = (segs[:, i][None, :] for i in range(4))
    vx, vy = bx - ax, by - ay
    t = np.clip(((px[:, None] - ax) * vx + (py[:, None] - ay) * vy) / np.maximum(vx * vx + vy * vy, 1e-12), 0, 1)
    return np.hypot(px[:, None] - ax - t * vx, py[:, None] - ay - t * vy).min(axis=1)


