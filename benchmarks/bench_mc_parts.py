"""Monte Carlo per-sample parts outside the path tracer, each against its reference in the same run.

Runnable as a plain script::

    python benchmarks/bench_mc_parts.py [--size 1000] [--samples 40] [--horizon 200]

Setup as ``bench_monte_carlo.py`` (a synthetic ferritic map of ``size × size`` points at 1 µm,
grains ~25 µm, seed 0; the tip at the middle of the left edge, growing along +x, load along y) and
the Monte Carlo's default noise. Numba runs on one thread. For ``--samples`` perturbed samples,
the best of three passes of each part is timed (per sample), then the ratio reference / new:

* field and peaks: ``MapFieldPlan.sample`` and ``field_peaks`` over the horizon (the numpy grain
  terms, the full window, a sort of the horizon's points) and ``FieldPlan.sample`` with
  ``greedy_peaks`` (the full-pass kernel), against ``FieldPlan.sample_peaks`` (the field where it
  is read, the peaks tile by tile);
* perturbation: ``quat_from_axis_angle`` and the numpy Hamilton product on the same draws,
  against ``perturb_orientations``;
* barrier features: ``localise.barrier_features`` (tables), against ``BarrierPlan.features``;
* ranking: ``rank_barriers`` (a DataFrame), against ``rank_pairs``.

Each pair is checked equal before it is timed. The machine is shared, so only the ratios (taken
in one process, pass by pass) mean much.
"""

from __future__ import annotations

import argparse

import numba
import numpy as np
from _timing import best_time  # benchmarks/ is the script's folder, so on sys.path

from slipnet.crystal import perturb_sample, slip_systems
from slipnet.crystal.orientation import quat_from_axis_angle
from slipnet.crystal.perturb import _qmul, perturb_orientations
from slipnet.forecast import forecast_crack, load_weights, rank_barriers
from slipnet.forecast._geometry import _Crystal, _Planes, geometry_of
from slipnet.forecast._mc_arrays import BarrierPlan, FieldPlan, rank_pairs
from slipnet.forecast._window import forecast_window
from slipnet.forecast.features import MapFieldPlan, field_peaks
from slipnet.forecast.localise import _coords, _GridShim, barrier_features
from slipnet.forecast.monte_carlo import _needed_points, _peaks
from slipnet.grains import build_grain_graph
from slipnet.synthetic import make_specimen


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=1000, help="map side in points (default 1000)")
    ap.add_argument("--samples", type=int, default=40, help="perturbed samples per pass (default 40)")
    ap.add_argument("--horizon", type=float, default=200.0, help="path length, µm (default 200)")
    args = ap.parse_args(argv)
    numba.set_num_threads(1)

    spec = make_specimen((args.size, args.size), 1.0, grain_size_um=25.0, seed=0)
    gg = build_grain_graph(spec.omap)
    geo, systems, wts = geometry_of(gg), slip_systems("bcc"), load_weights()
    tip, d, load, horizon = np.array([3.0, 0.5 * args.size]), np.array([1.0, 0.0]), np.array([0.0, 1.0, 0.0]), \
        float(args.horizon)
    fc = forecast_crack(gg, tip, d, load, horizon, systems=systems, mode="map")
    model = wts.model("map", "field")
    k, sep = max(len(fc.sites), 5), wts.site_separation_um
    # the Monte Carlo's window and plans (monte_carlo.py: tip spread 1 µm)
    win = forecast_window(gg, geo, tip, horizon + wts.drop_radius_um + 5.0 + 2.0 * geo.step)
    plan = MapFieldPlan(gg, geo, win, tip, d, load, systems)
    fplan = FieldPlan(plan)
    sxy = fc.sites[["x_um", "y_um"]].to_numpy(float)
    need = _needed_points(plan, geo, fc.barriers, np.asarray(gg.omap.index_of(sxy[:, 0], sxy[:, 1])),
                          wts.drop_radius_um)
    x, y = _coords(geo, plan.window)
    grid = _GridShim(x, y)
    solid = plan.solid.reshape(plan.shape)
    rng = np.random.default_rng(0)
    quats = np.asarray(gg.mean_quats, float)
    draws = []
    for _ in range(args.samples):
        q, ld, dt = perturb_sample(rng, quats, 1.5, load, 2.0, tip, 1.0)
        draws.append((q, ld, tip + dt, int(rng.integers(max(model.bootstrap_coef.shape[0], 1)))))

    def field_numpy():
        out = []
        for q, ld, t, rep in draws:
            _inp, fld = plan.sample(q, ld, t, d, model, rep)
            out.append(field_peaks(fld, solid & (np.hypot(x - t[0], y - t[1]) <= horizon), grid, k, sep))
        return out

    def field_full():
        out = []
        for q, ld, t, rep in draws:
            _tau, _fld, pv, px, py = fplan.sample(q, ld, t, d, model, rep, horizon, need)
            out.append(_peaks(pv, px, py, k, sep))
        return out

    def field_lazy():
        return [fplan.sample_peaks(q, ld, t, d, model, rep, horizon, need, k, sep)[2] for q, ld, t, rep in draws]

    for a, b, c in zip(field_numpy(), field_full(), field_lazy(), strict=True):
        np.testing.assert_array_equal(a, c)
        np.testing.assert_array_equal(b, c)

    n = quats.shape[0]
    states = []
    for _ in range(args.samples):
        states.append(rng.bit_generator.state)
        rng.normal(size=4 * n)

    def perturb_numpy():
        out = []
        for st in states:
            rng.bit_generator.state = st
            axes, ang = rng.normal(size=(n, 3)), rng.normal(0.0, 1.5, size=n)
            r = _qmul(quat_from_axis_angle(axes, ang), quats)
            out.append(np.where(r[:, :1] < 0, -r, r))
        return out

    def perturb_kernel():
        out = []
        for st in states:
            rng.bit_generator.state = st
            out.append(perturb_orientations(quats, 1.5, rng))
        return out

    for a, b in zip(perturb_numpy(), perturb_kernel(), strict=True):
        np.testing.assert_array_equal(a, b)

    # barrier features and ranking on the nominal field of each sample
    planes = _Planes(systems)
    bplan = BarrierPlan(fc.barriers, fc.crossings, geo, wts.drop_radius_um)
    r0, r1, c0, c1 = plan.window
    labels = geo.labels[r0:r1, c0:c1]
    cases = []
    for q, ld, t, rep in draws:
        inp, fld = plan.sample(q, ld, t, d, model, rep)
        cry = _Crystal(q, ld, planes)
        cry.ensure(np.concatenate([bplan.ga, bplan.gb]))
        cases.append((inp, fld, cry))

    def bar_tables():
        return [barrier_features(fc.barriers, fc.crossings, inp, fld, geo, cry, wts, horizon)
                for inp, fld, cry in cases]

    def bar_plan():
        return [bplan.features(fld, inp.tau, labels, inp.solid, x, y, cry) for inp, fld, cry in cases]

    for a, b in zip(bar_tables(), bar_plan(), strict=True):
        np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-14)
    rows = fc.crossings.to_dict("records")

    def rank_table():
        return [rank_barriers(fc.crossings) for _ in draws]

    def rank_rows():
        return [rank_pairs(rows) for _ in draws]

    np.testing.assert_array_equal(rank_table()[0]["barrier_score"].to_numpy(), rank_rows()[0]["barrier_score"])

    per = 1e3 / args.samples
    print(f"map {args.size} × {args.size} points, {gg.n_grains} grains; horizon {horizon:g} µm, window "
          f"{plan.shape[0]} × {plan.shape[1]}, {int(need.sum())} points read beyond the peaks; {len(fc.barriers)} "
          f"barriers, {k} peaks at {sep:g} µm; {args.samples} samples, one thread; ms per sample, best of 3")
    for name, ref, fns in (
            ("field + peaks", field_numpy, (("full-pass kernel", field_full), ("lazy tiles", field_lazy))),
            ("perturbation", perturb_numpy, (("kernel", perturb_kernel),)),
            ("barrier features", bar_tables, (("BarrierPlan", bar_plan),)),
            ("ranking", rank_table, (("rank_pairs", rank_rows),))):
        t_ref = best_time(ref, 3)
        line = f"{name}: reference {t_ref * per:.3f}"
        for label, fn in fns:
            t = best_time(fn, 3)
            line += f"; {label} {t * per:.3f} (ratio {t_ref / t:.1f}×)"
        print(line)


if __name__ == "__main__":
    main()
