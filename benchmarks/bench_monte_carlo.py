"""Monte Carlo forecast speed: 500 samples on a 1000 × 1000 point map against one forecast, 1 and 2 workers.

Shaped like an asv benchmark (setup, parameters, a fixed seed), runnable as a plain script::

    python benchmarks/bench_monte_carlo.py [--size 1000] [--samples 500] [--horizon 200] [--mode map]

Setup: a synthetic ferritic map of ``size × size`` points at 1 µm (grains ~25 µm, seed 0), its grain
graph, and a tip at the middle of the left edge growing along +x under a load along y. Then, in
the same run:

* the reference: one forecast without samples (best of 3, kernels compiled and the per-graph set-up
  cached beforehand);
* ``--samples`` Monte Carlo samples (default noise: orientation 1.5°, load 2°, tip 1 µm, weights 20 %,
  a bootstrap replicate of the fitted weights) on one worker with numba limited to one thread
  (target: at most 15 × the reference), and on two workers (target: at least 1.7 × faster than one);
* a check that both give the same tables (the numbers must not depend on the number of workers).

The machine has 2 cores shared with other jobs, so the times are noisy; the ratios are taken
between runs made in the same process.
"""

from __future__ import annotations

import argparse
import time

import numba
import numpy as np
from _timing import best_time  # benchmarks/ is the script's folder, so on sys.path

from slipnet.crystal import slip_systems
from slipnet.forecast import forecast_crack
from slipnet.grains import build_grain_graph
from slipnet.synthetic import make_specimen


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=1000, help="map side in points (default 1000)")
    ap.add_argument("--samples", type=int, default=500, help="Monte Carlo samples (default 500)")
    ap.add_argument("--horizon", type=float, default=200.0, help="path length, µm (default 200)")
    ap.add_argument("--mode", default="map", choices=["map", "elastic"], help="forecast mode (default map)")
    args = ap.parse_args(argv)

    spec = make_specimen((args.size, args.size), 1.0, grain_size_um=25.0, seed=0)
    gg = build_grain_graph(spec.omap)
    tip, direction, load = (3.0, 0.5 * args.size), (1.0, 0.0), (0.0, 1.0, 0.0)
    systems = slip_systems("bcc")
    field = None
    if args.mode == "elastic":  # the solve once, given to every call: the benchmark times the forecast
        from slipnet.forecast import crack_aware_stress

        field = crack_aware_stress(gg.omap, load, 200.0)

    def run(samples: int, workers: int = 1):
        return forecast_crack(gg, tip, direction, load, args.horizon, systems=systems, mode=args.mode,
                              stress_field=field, samples=samples, seed=0, workers=workers)

    run(3, 2)  # compile the kernels, build the per-graph set-up
    threads = numba.get_num_threads()
    numba.set_num_threads(1)
    try:
        t_one = best_time(lambda: run(0), 3)
        fc = run(0)
        t0 = time.perf_counter()
        mc1 = run(args.samples, 1)
        t_mc1 = time.perf_counter() - t0
    finally:
        numba.set_num_threads(threads)
    t0 = time.perf_counter()
    mc2 = run(args.samples, 2)
    t_mc2 = time.perf_counter() - t0
    assert len(fc.barriers) >= 2 and fc.path["grain"].nunique() >= 3, "the forecast did too little work"
    assert len(mc1.samples) == args.samples and mc1.samples.equals(mc2.samples)
    for col in ("p_on_path", "p_top_k", "p_drop"):
        assert np.array_equal(mc1.barriers[col].to_numpy(), mc2.barriers[col].to_numpy()), col
    for col in ("p_hit", "p_present", "p_top_k"):
        assert np.array_equal(mc1.sites[col].to_numpy(), mc2.sites[col].to_numpy()), col
    print(f"map {args.size} × {args.size} points, {gg.n_grains} grains; {args.mode} mode, "
          f"horizon {args.horizon:g} µm: "
          f"{fc.path['grain'].nunique()} path grains, {len(fc.barriers)} barriers, {len(fc.sites)} sites")
    print(f"one forecast (reference, one core): {t_one * 1e3:.1f} ms")
    r1 = t_mc1 / t_one
    print(f"{args.samples} samples, 1 worker (one core): {t_mc1:.2f} s "
          f"({t_mc1 / args.samples * 1e3:.1f} ms per sample)")
    print(f"  ratio Monte Carlo / one forecast = {r1:.1f}  (target <= 15: {'met' if r1 <= 15 else 'NOT met'})")
    sp = t_mc1 / t_mc2
    print(f"{args.samples} samples, 2 workers: {t_mc2:.2f} s; speed-up over 1 worker = {sp:.2f}  "
          f"(target >= 1.7: {'met' if sp >= 1.7 else 'NOT met'})")
    print("  tables of 1 and 2 workers identical: yes")


if __name__ == "__main__":
    main()
