"""The path-tracer kernel (forecast._trace_kernel) gives the segments and crossings of _core._trace_all."""

from __future__ import annotations

import math

import numpy as np
import pytest

from slipnet.crystal import quat_from_axis_angle, slip_systems
from slipnet.errors import ParameterError
from slipnet.forecast import PathWeights
from slipnet.forecast._core import _make_opts, _start_grain, _trace_all
from slipnet.forecast._geometry import _Crystal, _Planes, geometry_of
from slipnet.forecast._trace_kernel import ENDS, trace_arrays
from slipnet.grains import build_grain_graph
from slipnet.maps import OrientationMap


def _omap(q: np.ndarray, indexed=None) -> OrientationMap:
    ny, nx = q.shape[:2]
    ind = np.ones((ny, nx), bool) if indexed is None else indexed
    q = q.copy()
    q[~ind] = np.nan
    return OrientationMap(quats=q, phase=np.where(ind, 0, -1), quality=np.ones((ny, nx)), indexed=ind, step=1.0)


@pytest.fixture(scope="module")
def poly_gg():
    from slipnet.synthetic import make_specimen

    return build_grain_graph(make_specimen((160, 160), 1.0, grain_size_um=18.0, seed=4).omap)


def _opts(d, load, horizon=120.0, **kw):
    base = dict(stage2_after_um=None, stage2_min_schmid=None, zigzag_tol=0.05, zigzag_step_fraction=0.3,
                branch_tol=0.05, max_branches=6, boundary_inclination_deg=90.0, unindexed="stop",
                unindexed_gap_um=5.0, path_weights=PathWeights())
    base.update(kw)
    return _make_opts(horizon, np.asarray(d, float) / np.linalg.norm(d), np.asarray(load, float), **base)


def _same(a, b) -> bool:
    if isinstance(a, str) or isinstance(b, str):
        return a == b  # labels: plane, stage, leg, end, boundary class
    a, b = float(a), float(b)
    return a == b or (math.isnan(a) and math.isnan(b))  # bit-equal numbers


def _check(gg, tip, d, load, systems=None, rows="start", **kw):
    """Trace with both tracers; assert every field equal; return the reference states and rows."""
    planes = _Planes(systems or slip_systems("bcc"))
    geo = geometry_of(gg)
    opts = _opts(d, load, **kw)
    tip = np.asarray(tip, float)
    g0 = _start_grain(geo, tip, opts.d_ref)
    q = np.asarray(gg.mean_quats, float)
    states, alt = _trace_all(geo, _Crystal(q, load, planes), planes, tip[0], tip[1], g0, opts)
    # the kernel's crystal starts with the start grain's row only: every other row is fetched on a retry
    cry = _Crystal(q, load, planes, rows=np.array([g0]) if rows == "start" else None)
    tr = trace_arrays(geo, cry, planes, tip[0], tip[1], g0, opts, seg_rows=2, cross_rows=1)
    want, got = states[0].crossings + alt, tr.crossing_dicts()
    assert len(got) == len(want)
    for w, g in zip(want, got, strict=True):
        for k, v in w.items():
            assert _same(g[k], v), (k, g[k], v)
    assert tr.states.shape[0] == len(states)
    for b, st in enumerate(states):
        segs = tr.segment_dicts(b)
        assert len(segs) == len(st.segments)
        for w, g in zip(st.segments, segs, strict=True):
            for k, v in w.items():
                assert _same(g[k], v), (b, k, g[k], v)
        assert ENDS[int(tr.states[b, 4])] == st.stop
    assert tr.main_stop == states[0].stop
    assert tr.n_main_crossings == len(states[0].crossings)
    assert tr.main_length() == float(sum(s["length_um"] for s in states[0].segments))
    return states, want


def test_kernel_equals_trace_all_on_a_polycrystal_with_branches_stage_ii_and_zigzags(poly_gg):
    seen_stops, stage2, zigzag, budget_out, n_cases = set(), False, False, False, 0
    rng = np.random.default_rng(7)
    for _ in range(14):
        load = rng.normal(size=3)
        load[2] *= 0.3
        load /= np.linalg.norm(load)
        tip = rng.uniform(10.0, 150.0, 2)
        d = rng.normal(size=2)
        kw = dict(stage2_after_um=float(rng.choice([30.0, 1e9])), stage2_min_schmid=0.3,
                  zigzag_tol=float(rng.choice([0.0, 0.1, 0.25])), branch_tol=float(rng.choice([0.05, 0.3])),
                  max_branches=int(rng.choice([0, 2, 12])), boundary_inclination_deg=float(rng.choice([90.0, 65.0])))
        try:
            states, rows = _check(poly_gg, tip, d, load, **kw)
        except ParameterError:  # a tip on an unindexed point of the synthetic map
            continue
        n_cases += 1
        seen_stops.update(s.stop for s in states)
        stage2 |= any(sg["stage"] == "II" for s in states for sg in s.segments)
        zigzag |= any(sg["leg"] == "zigzag" for s in states for sg in s.segments)
        # the budget ran out: all allowed alternatives queued while some close planes were left over
        queued = len(states) - 1
        opening = {i for i in range(len(rows)) if rows[i]["branch"] > 0 and (i == 0 or rows[i - 1]["branch"]
                                                                             != rows[i]["branch"])}
        offered = sum(r["n_close"] for i, r in enumerate(rows) if i not in opening)
        budget_out |= 0 < queued == kw["max_branches"] < offered
    assert n_cases >= 10
    assert stage2 and zigzag and budget_out
    assert {"horizon", "map_edge", "blocked"} <= seen_stops


def test_kernel_equals_trace_all_on_tied_zigzag_planes():
    # identity orientation, load along y, {110}<111> only: (011) and (110) tie exactly at
    # m = 1/√6 (common practice: the cube orientation under <010> loading), so the tie breaks decide
    q = np.zeros((60, 200, 4))
    q[..., 0] = 1.0
    gg = build_grain_graph(_omap(q))
    sysm = slip_systems("bcc", ["{110}<111>"])
    states, _ = _check(gg, (5.0, 30.0), (1.0, 0.0), (0.0, 1.0, 0.0), systems=sysm, horizon=60.0, zigzag_tol=0.01,
                       zigzag_step_fraction=0.05)
    assert sum(sg["leg"] == "zigzag" for sg in states[0].segments) >= 3
    # no zigzag: the one trace runs out of the map
    states, _ = _check(gg, (5.0, 30.0), (1.0, 0.0), (0.0, 1.0, 0.0), systems=sysm, horizon=400.0, zigzag_tol=0.0)
    assert states[0].stop == "map_edge"


def test_kernel_equals_trace_all_at_unindexed_gaps_stopped_and_crossed():
    n = (np.array([0.0, 1.0, 1.0]) / math.sqrt(2.0))
    dd = np.array([1.0, 1.0, -1.0]) / math.sqrt(3.0)
    load = (n + dd) / np.linalg.norm(n + dd)
    q = np.zeros((30, 80, 4))
    q[..., 0] = 1.0
    q[:, 40:] = quat_from_axis_angle(load, 180.0)
    ind = np.ones((30, 80), bool)
    ind[:, 20:28] = False
    gg = build_grain_graph(_omap(q, indexed=ind))
    states, _ = _check(gg, (5.0, 15.0), (1.0, 0.0), load, horizon=100.0, zigzag_tol=0.0)
    assert states[0].stop == "unindexed"
    # a long enough gap is walked: the grains beyond are not adjacent in the graph (boundary id −1)
    states, rows = _check(gg, (5.0, 15.0), (1.0, 0.0), load, horizon=100.0, zigzag_tol=0.0, unindexed_gap_um=9.0)
    assert rows[0]["boundary_id"] == -1 and math.isnan(rows[0]["misorientation_deg"])
    states, _ = _check(gg, (5.0, 15.0), (1.0, 0.0), load, horizon=100.0, zigzag_tol=0.0, unindexed="cross",
                       rows=None)
    assert max(sg["x1_um"] for sg in states[0].segments) > 40.0


def test_kernel_refuses_stage_ii_without_an_in_plane_load(poly_gg):
    planes = _Planes(slip_systems("bcc"))
    geo = geometry_of(poly_gg)
    load = np.array([0.0, 0.0, 1.0])
    opts = _opts((1.0, 0.0), load, stage2_after_um=0.0)
    cry = _Crystal(np.asarray(poly_gg.mean_quats, float), load, planes)
    g0 = _start_grain(geo, np.array([80.0, 80.0]), opts.d_ref)
    with pytest.raises(ParameterError, match="stage II needs an in-plane load"):
        trace_arrays(geo, cry, planes, 80.0, 80.0, g0, opts)


def _numpy_rows(q, load, planes, schmid=None):
    # the numpy pass _Crystal.ensure made before the kernel: the reference the kernel must equal to the bit
    from slipnet.forecast._geometry import _matrices

    g = _matrices(q)
    n_s = np.matmul(planes.sys_normals[None], g)
    d_s = np.matmul(planes.sys_dirs[None], g)
    schmid = (n_s @ load) * (d_s @ load) if schmid is None else schmid
    meff = np.abs(schmid) / np.where(schmid >= 0, planes.crss, planes.crss_rev)
    plane_sys = np.zeros((q.shape[0], planes.n_planes), np.int64)
    for p, members in enumerate(planes.members):
        plane_sys[:, p] = members[np.argmax(meff[:, members], axis=1)]
    plane_n = np.matmul(planes.normals[None], g)
    t = np.stack([plane_n[..., 1], -plane_n[..., 0]], axis=-1)
    tn = np.linalg.norm(t, axis=-1)
    ok = tn > 0.05
    return {"n_s": n_s, "d_s": d_s, "schmid": schmid, "meff": meff, "plane_sys": plane_sys,
            "plane_meff": np.take_along_axis(meff, plane_sys, axis=1), "plane_n": plane_n, "trace_ok": ok,
            "trace": t / np.where(ok, tn, 1.0)[..., None], "best_sys": np.argmax(meff, axis=1)}


@pytest.mark.parametrize("families", [None, ["{110}<111>"]])
def test_crystal_rows_kernel_equals_the_numpy_pass(families):
    rng = np.random.default_rng(5)
    systems = slip_systems("bcc", families) if families else slip_systems("bcc")
    planes = _Planes(systems)
    q = rng.normal(size=(400, 4))
    q /= np.linalg.norm(q, axis=1)[:, None]
    q[:4] = [1.0, 0.0, 0.0, 0.0]  # exact ties between systems
    q[9] = np.nan  # a grain without an orientation
    load = np.array([0.1, 0.95, 0.2]) / np.linalg.norm([0.1, 0.95, 0.2])
    for schmid in (None, rng.normal(size=(400, len(systems.normals)))):
        want = _numpy_rows(q, load, planes, schmid)
        rows = rng.choice(400, 150, replace=False)
        cry = _Crystal(q, load, planes, schmid, rows=rows)
        cry.ensure(np.arange(400))  # the rest in a second pass: a row does not depend on its batch
        for k, v in want.items():
            assert np.array_equal(getattr(cry, k), v, equal_nan=v.dtype.kind == "f"), k
