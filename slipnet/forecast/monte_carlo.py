"""Monte Carlo uncertainty of a crack forecast: probabilities per site and barrier.

Called by :func:`slipnet.forecast.forecast_crack` when ``samples > 0``. Each sample draws, from one
``numpy.random.Generator`` seeded once and in a fixed order (:func:`slipnet.crystal.perturb_sample`):
a rotation of every grain's orientation (normal angle, random axis; applied to each point of the
grain), a misalignment of the load axis, a jitter of the tip, a log-normal jitter of the path and
resistance weights, and one bootstrap replicate of the fitted weights (the fit's own uncertainty:
the weights refitted on the training specimens resampled with replacement).

Per sample the point features are recomputed on the perturbed orientations and tip: the nominal
elastic solve is kept and its stress resolved on the rotated crystals (``MonteCarloNoise.resolve_stress``
solves again per sample instead), a given ``cyclic_field`` is kept; the load misalignment then moves
the path passes only. The field follows from the replicate's weights, and the nominal sites and
barriers are scored again. The reported probabilities are the sample means:

* sites: ``p_hit`` (mean site probability at the nominal site), ``p_present`` (share of samples with a
  field peak within the hit radius of it) and ``p_top_k`` (… among the sample's top k);
* barriers: ``p_drop`` (mean probability of a slip drop across it), ``p_on_path`` (share of samples
  whose main path crosses it) and ``p_top_k`` (share in which it ranks within the top k).

Averaging the calibrated probabilities over the input and weight uncertainty keeps them calibrated
to the extent the perturbations are realistic; the harness checks it (reliability diagram, Brier
score: :mod:`slipnet.validation`).

How it is computed: the draws are made in batches of :data:`BATCH` samples, each sample's in the
order above, so the stream (and every number) is that of a plain sample-by-sample loop whatever the
batch or the number of worker threads. Each sample works on the forecast's window (the horizon of
its tip) and reads per-grain data only for the grains in it. A sample keeps its results as arrays
until the final tables: its barriers are ranked from the tracer's crossing rows in array passes
(:func:`slipnet.forecast._mc_arrays.rank_pairs`, the numbers of
:func:`slipnet.forecast.barriers.rank_barriers`) and the barrier features read the nominal tables
once (``BarrierPlan``). In map mode without a crack the window's geometry is prepared once
(:class:`slipnet.forecast.features.MapFieldPlan`, ``FieldPlan``) and each sample's field, τ and
peak-search points are one kernel pass, beyond the horizon only where the sample reads them; in the
other modes each sample runs the windowed feature builder. The paths are traced by one numba kernel
(:func:`slipnet.forecast._trace_kernel.trace_arrays`, the rows of ``_core._trace_all`` to the bit)
on the sample's crystal rows, computed for the window's grains in one vectorised pass. The tracer
and field kernels release the GIL, so with ``workers > 1`` each thread computes whole samples;
what still holds the GIL per sample is the numpy glue around the kernels (crystal rows, grain
terms of the field, ranking, barrier features).
"""

from __future__ import annotations

from dataclasses import fields, replace

import numpy as np
import pandas as pd

from slipnet.crystal.orientation import quat_conjugate, quat_multiply
from slipnet.crystal.perturb import perturb_sample
from slipnet.forecast._core import _start_grain
from slipnet.forecast._geometry import _Crystal
from slipnet.forecast._kernels import greedy_peaks
from slipnet.forecast._mc_arrays import BarrierPlan, FieldPlan, rank_pairs
from slipnet.forecast._trace_kernel import trace_arrays
from slipnet.forecast._window import forecast_window
from slipnet.forecast.features import MapFieldPlan, field_peaks, window_features
from slipnet.forecast.localise import _coords, _GridShim, predict_field, site_probability

__all__ = ["monte_carlo"]


def _jitter(wobj, sigma: float, rng: np.random.Generator):
    vals = {f.name: getattr(wobj, f.name) for f in fields(wobj)}
    fac = np.exp(rng.normal(0.0, sigma, size=len(vals))) if sigma > 0 else np.ones(len(vals))
    return replace(wobj, **{k: float(v * f) for (k, v), f in zip(vals.items(), fac, strict=True)})


def _pair(a, b) -> tuple[int, int]:
    return (min(int(a), int(b)), max(int(a), int(b)))


def _rotated_quats(omap, gg, q_new: np.ndarray) -> np.ndarray:
    """The point quaternions of ``omap`` with every point of grain g rotated by q_new[g] · q_mean[g]⁻¹."""
    q_old = np.asarray(gg.mean_quats, float)
    ok = np.all(np.isfinite(q_old), axis=1) & np.all(np.isfinite(q_new), axis=1)
    dq = np.tile([1.0, 0.0, 0.0, 0.0], (q_old.shape[0], 1))
    if ok.any():
        dq[ok] = quat_multiply(q_new[ok], quat_conjugate(q_old[ok]))
    labels = np.asarray(gg.labels)
    q = np.array(omap.quats, float)
    sel = (labels >= 0) & np.asarray(omap.indexed) & np.all(np.isfinite(q), axis=-1)
    if sel.any():
        r = quat_multiply(dq[labels[sel]], q[sel])
        q[sel] = np.where(r[:, :1] < 0, -r, r)
    return q


def _rotated_graph(gg, q_new: np.ndarray):
    """The grain graph with every point of grain g rotated by q_new[g] · q_mean[g]⁻¹."""
    return replace(gg, omap=replace(gg.omap, quats=_rotated_quats(gg.omap, gg, q_new)),
                   mean_quats=np.asarray(q_new, float))


def _draw(rng, quats, load, tip, opts, bw, noise, n_rep: int, schmid, stress_given: bool, geo) -> dict:
    """One sample's perturbations, drawn from ``rng`` in the fixed order of the sequential loop."""
    q, ld, dt = perturb_sample(rng, quats, noise.orientation_deg, load, noise.load_deg, tip, noise.tip_um)
    if schmid is not None and stress_given:  # local factors from a given solve at the nominal load
        ld = load
    t = tip + dt
    pw = _jitter(opts.pw, noise.weights, rng)
    bws = _jitter(bw, noise.weights, rng)
    draw = int(rng.integers(max(n_rep, 1)))  # always drawn, so switching it off shifts no other draw
    rep = draw if n_rep and noise.fitted_weights else None
    reset = geo.label_at(t[0], t[1]) < 0
    if reset:
        t = tip.copy()
    return {"q": q, "ld": ld, "t": t, "pw": pw, "bw": bws, "rep": rep, "reset": bool(reset)}


#: Samples drawn and computed together: the draws of a batch are made in sample order, then the
#: batch is computed (in parallel when asked); memory grows with the batch × the number of grains.
BATCH = 64


def monte_carlo(fc, geo, planes, quats, load, schmid, tip, opts, *, samples: int, seed: int, noise, top_k: int,
                amplitude: float, decay: float, bw, cf, site_radius: float | None = None, gg=None, inputs=None,
                weights=None, crack=None, systems=None, stress_given: bool = False, cyclic_field=None,
                free_edges="auto", ratio: float = -1.0, barrier_model: str = "fitted", workers: int = 1):
    """Repeat the forecast under perturbed inputs; return ``fc`` with probabilities and ``samples``.

    The arguments are the prepared inputs of :func:`slipnet.forecast.forecast_crack`. A perturbed
    tip falling outside the map or on an unindexed point is put back at the nominal tip (counted
    in the ``tip_reset`` column).

    The perturbations are drawn in batches of :data:`BATCH` samples, each sample's draws in the
    order of the sequential loop (one stream whatever the batch or the number of workers); the
    samples of a batch are then computed on ``workers`` threads, each into its own slot, and the
    sums are taken in sample order, so the numbers do not depend on ``workers``. Every sample works
    on the window of the forecast (the horizon of its tip): nothing per sample grows with the map.
    """
    from concurrent.futures import ThreadPoolExecutor

    rng = np.random.default_rng(seed)
    bar_keys = [_pair(a, b) for a, b in zip(fc.barriers["grain_a"], fc.barriers["grain_b"], strict=True)]
    uniq = list(dict.fromkeys(bar_keys))  # barriers of one grain pair share their counts
    bar_index = {k: i for i, k in enumerate(uniq)}
    bar_pos = np.array([bar_index[k] for k in bar_keys], np.int64)
    nk = len(uniq)
    nb, ns = len(fc.barriers), len(fc.sites)
    sxy = fc.sites[["x_um", "y_um"]].to_numpy(float) if ns else np.zeros((0, 2))
    mode = inputs.mode if inputs is not None else "map"
    n_rep = weights.model(mode, "field").n_replicates if weights is not None else 0
    hit_r = weights.hit_radius_um if weights is not None else 0.0
    drop_r = weights.drop_radius_um if weights is not None else 0.0
    quats = np.asarray(quats, float)
    q_old = np.asarray(gg.mean_quats, float) if gg is not None else quats
    # one window holds every sample's horizon unless its tip strays beyond five standard deviations
    spread = 5.0 * float(noise.tip_um) + 2.0 * max(geo.step, geo.rs)
    win = forecast_window(gg, geo, tip, opts.horizon + drop_r + spread) if gg is not None else None
    memo: dict = {}
    keep = stress_given or not noise.resolve_stress
    plan = fplan = None
    if win is not None and weights is not None and inputs is not None and mode == "map" and crack is None:
        # the geometry of the window once; each sample then costs its grain terms and one kernel pass
        plan = MapFieldPlan(gg, geo, win, tip, opts.d_ref, load, systems)
        field_model = weights.model(mode, "field")
        fplan = FieldPlan(plan)
        plan_solid = plan.solid.reshape(plan.shape)
        need = None  # set below, once the sites are known
    # the nominal grain pairs, sorted by code, for a look-up of each sample's ranking in array passes
    code_base = int(geo.n_grains) + 1
    nom_code = np.array([a * code_base + c for a, c in uniq], np.int64)
    nom_order = np.argsort(nom_code, kind="stable")
    nom_code_sorted = nom_code[nom_order]
    class_memo: dict = {}
    bar_plan = BarrierPlan(fc.barriers, fc.crossings, geo, drop_r) if (nb and weights is not None) else None
    site_ij = np.asarray(gg.omap.index_of(sxy[:, 0], sxy[:, 1])) if (ns and gg is not None) else None
    if fplan is not None:
        # beyond a sample's horizon only the nominal sites and the barriers' surroundings are read
        need = _needed_points(plan, geo, fc.barriers, site_ij, drop_r)

    def field_part(dr: dict):
        """The map-mode field, τ and peaks of one sample (kernels that release the GIL, mostly)."""
        tau_w, fld, pv, px, py = fplan.sample(dr["q"], load if keep else dr["ld"], dr["t"], opts.d_ref, field_model,
                                              dr["rep"], opts.horizon, need)
        peaks = _peaks(pv, px, py, max(ns, top_k), weights.site_separation_um) if ns else None
        return tau_w, fld, peaks

    def one(s: int, dr: dict) -> dict:
        q, ld, t = dr["q"], dr["ld"], dr["t"]
        g0 = _start_grain(geo, t, opts.d_ref)
        o = replace(opts, pw=dr["pw"])
        w = win
        if w is not None and not _holds(geo, w, t, opts.horizon + drop_r):
            w = forecast_window(gg, geo, np.stack([tip, t]), opts.horizon + drop_r)
        cry = _Crystal(q, ld, planes, schmid, rows=None if w is None else w.reach)
        # the paths in one kernel call that releases the GIL (the rows of _core._trace_all)
        tr = trace_arrays(geo, cry, planes, float(t[0]), float(t[1]), g0, o)
        # the ranking as arrays: no crossing or barrier table per sample
        b = rank_pairs(tr.rank_rows(), dr["bw"], decay_length_um=decay, class_factors=cf, class_memo=class_memo)
        out = {"on_path": np.zeros(nk), "top": np.zeros(nk), "p_hit": np.zeros(ns), "present": np.zeros(ns),
               "site_top": np.zeros(ns), "p_drop": np.zeros(nb)}
        if nk and b["lo"].size:
            code = b["lo"] * code_base + b["hi"]
            at = np.clip(np.searchsorted(nom_code_sorted, code), 0, nk - 1)
            hit = nom_code_sorted[at] == code
            i = nom_order[at[hit]]
            np.add.at(out["on_path"], i, b["on_path"][hit].astype(float))
            np.add.at(out["top"], i, (np.arange(1, code.size + 1)[hit] <= top_k).astype(float))
        if weights is not None and inputs is not None:
            crack_s = None
            if crack is not None:
                crack_s = np.asarray(crack, float).copy()
                crack_s[-1] = t
            kw = dict(mode=mode, stress_amplitude=amplitude, crack=crack_s, systems=systems, free_edges=free_edges,
                      stress_ratio=ratio, cyclic_field=inputs.cyclic_field if mode == "cyclic" else cyclic_field,
                      memo=memo if w is win else None)
            peaks = None
            if fplan is not None and w is win:
                tau_w, fld, peaks = field_part(dr)
                solid_w, window = plan_solid, plan.window
            else:
                with solve_lock:  # parallel kernels of the stress steps: one thread at a time if they must be
                    if keep:
                        rot = None if inputs.stress_field is None else _rotation(q_old, q)
                        inp = window_features(gg, geo, w, t, opts.d_ref, load, stress_field=inputs.stress_field,
                                              mean_quats=q, point_rotation=rot, **kw)
                    else:  # a solve per sample on the rotated map (MonteCarloNoise.resolve_stress)
                        inp = window_features(_rotated_graph(gg, q), geo, w, t, opts.d_ref, ld, **kw)
                fld = predict_field(inp, weights, dr["rep"])
                tau_w, solid_w, window = inp.tau, inp.solid, inp.window
            r0, r1, c0, c1 = window
            x, y = _coords(geo, window)
            if ns:
                out["p_hit"] = site_probability(fld[site_ij[0] - r0, site_ij[1] - c0], weights, mode, dr["rep"])
                if peaks is None:
                    region = solid_w & (np.hypot(x - t[0], y - t[1]) <= opts.horizon)
                    peaks = field_peaks(fld, region, _GridShim(x, y), max(ns, top_k), weights.site_separation_um)
                pk = peaks
                if len(pk):
                    d2 = (sxy[:, 0, None] - pk[None, :, 0]) ** 2 + (sxy[:, 1, None] - pk[None, :, 1]) ** 2
                    near = d2 <= hit_r ** 2
                    out["present"] = near.any(axis=1).astype(float)
                    out["site_top"] = near[:, :top_k].any(axis=1).astype(float)
            if nb:
                xb = bar_plan.features(fld, tau_w, geo.labels[r0:r1, c0:c1], solid_w, x, y, cry)
                out["p_drop"] = weights.model(mode, "barriers").probability(xb, dr["rep"])
        end = tr.main_end() or (t[0], t[1])
        out["row"] = {
            "sample": s, "tip_x_um": float(t[0]), "tip_y_um": float(t[1]), "tip_reset": dr["reset"],
            "load_x": float(ld[0]), "load_y": float(ld[1]), "load_z": float(ld[2]),
            "path_length_um": tr.main_length(), "n_crossings": tr.n_main_crossings,
            "stop_reason": tr.main_stop,
            "top_barrier_id": int(b["boundary_id"][0]) if b["boundary_id"].size else -1,
            "end_x_um": float(end[0]), "end_y_um": float(end[1]),
        }
        return out

    tot = {k: np.zeros(nk if k in ("on_path", "top") else nb if k == "p_drop" else ns) for k in
           ("on_path", "top", "p_hit", "present", "site_top", "p_drop")}
    rows = []
    n_workers = max(1, int(workers))
    solve_lock = _parallel_guard(n_workers)
    geo.edge_arrays()  # the tracer's boundary look-up, built here rather than raced for by the threads
    pool = ThreadPoolExecutor(max_workers=n_workers) if n_workers > 1 else None
    try:
        for start in range(0, samples, BATCH):
            idx = range(start, min(samples, start + BATCH))
            draws = [_draw(rng, quats, load, tip, opts, bw, noise, n_rep, schmid, stress_given, geo) for _ in idx]
            if pool is not None:  # whole samples per thread: the tracer and field kernels release the GIL
                outs = list(pool.map(one, idx, draws))
            else:
                outs = [one(s, d) for s, d in zip(idx, draws, strict=True)]
            for o in outs:  # summed in sample order: the same numbers for any number of workers
                for k in tot:
                    tot[k] += o[k]
                rows.append(o["row"])
    finally:
        if pool is not None:
            pool.shutdown()
    n = float(samples)
    barriers = fc.barriers.copy()
    barriers["p_on_path"] = tot["on_path"][bar_pos] / n
    barriers["p_top_k"] = tot["top"][bar_pos] / n
    barriers["p_drop"] = tot["p_drop"] / n
    sites = fc.sites.copy()
    sites["p_present"] = tot["present"] / n
    sites["p_top_k"] = tot["site_top"] / n
    sites["p_hit"] = tot["p_hit"] / n
    return replace(fc, barriers=barriers, sites=sites, samples=pd.DataFrame(rows))


def _parallel_guard(n_workers: int):
    """A lock for the steps that run numba's parallel kernels, when threads may not share them.

    The "omp" and "tbb" threading layers take parallel kernels from several threads at once;
    "workqueue" aborts the process on that, so there the stress steps of the samples take turns.
    """
    import contextlib
    import threading

    if n_workers <= 1:
        return contextlib.nullcontext()
    import numba

    try:
        layer = numba.threading_layer()
    except ValueError:  # no parallel kernel has run yet: the layer is chosen from the configuration
        layer = str(numba.config.THREADING_LAYER)
    return contextlib.nullcontext() if layer in ("omp", "tbb") else threading.Lock()


def _rotation(q_old: np.ndarray, q_new: np.ndarray) -> np.ndarray:
    """Per grain q_new · q_old⁻¹ (identity where either is undefined), as :func:`_rotated_quats` takes it."""
    ok = np.all(np.isfinite(q_old), axis=1) & np.all(np.isfinite(q_new), axis=1)
    dq = np.tile([1.0, 0.0, 0.0, 0.0], (q_old.shape[0], 1))
    if ok.any():
        dq[ok] = quat_multiply(q_new[ok], quat_conjugate(q_old[ok]))
    return dq


def _needed_points(plan, geo, barriers, site_ij, drop_r: float) -> np.ndarray:
    """Flat mask of the plan's window: the metal points within the drop radius (and two steps) of a
    nominal barrier's crossing point, and the nominal sites' points."""
    r0, _r1, c0, _c1 = plan.window
    need = np.zeros(plan.lab.size, bool)
    reach2 = (drop_r + 2.0 * max(geo.step, geo.rs)) ** 2
    for bx, by in zip(barriers["x_um"].to_numpy(float), barriers["y_um"].to_numpy(float), strict=True):  # tens
        need |= (plan.x - bx) ** 2 + (plan.y - by) ** 2 <= reach2
    if site_ij is not None and len(site_ij[0]):
        need[(np.asarray(site_ij[0]) - r0) * plan.shape[1] + (np.asarray(site_ij[1]) - c0)] = True
    return need & plan.solid


def _peaks(values: np.ndarray, x: np.ndarray, y: np.ndarray, k: int, separation_um: float) -> np.ndarray:
    """:func:`slipnet.forecast.features.field_peaks` of points already cut to the region, ``(≤k, 2)`` µm."""
    if values.size == 0 or k <= 0:
        return np.zeros((0, 2))
    out = np.zeros((int(k), 2))
    n = greedy_peaks(values, np.ones(values.size, np.bool_), x, y, int(k), float(separation_um) ** 2, out)
    return out[:n].copy()


def _holds(geo, win, t, radius: float) -> bool:
    """Whether the window's inner box holds every point within ``radius`` of ``t`` (that lies on the map)."""
    pad = 2.0 * max(geo.step, geo.rs)
    rr = radius + pad
    r0 = max(0, int(np.floor((t[1] - rr - geo.oy) / geo.rs)))
    r1 = min(geo.ny, int(np.ceil((t[1] + rr - geo.oy) / geo.rs)) + 1)
    c0 = max(0, int(np.floor((t[0] - rr - geo.ox) / geo.step)) - 1)
    c1 = min(geo.nx, int(np.ceil((t[0] + rr - geo.ox) / geo.step)) + 2)
    b = win.inner
    return b.r0 <= r0 and b.c0 <= c0 and b.r1 >= r1 and b.c1 >= c1
