"""Forecast scaling with map size: one table from 250² to 2000² points (4000² with ``--large``).

Runnable as a plain script::

    python benchmarks/bench_scaling.py [--horizon 100] [--samples 20] [--large] [--csv scaling.csv]

For each square synthetic map (1 µm step, grains ~25 µm, seed 0) it times, in one process:

* the grain graph (``build_grain_graph``, once: the part that is meant to grow with the map);
* a repeated forecast from the middle of the left edge (map mode, ``--horizon`` µm, best of 3, the
  kernels compiled and the per-graph set-up cached beforehand);
* a Monte Carlo of ``--samples`` samples, per sample;

and prints each against the 250² row measured in the same run. The forecast works on a window
around its tip, so its columns should stay flat while the graph column grows with the points.
``--large`` adds 4000² (16 M points: about a minute for the map and the graph, a few GiB of memory;
the machine has 24 GiB). The machine has 2 cores shared with other jobs, so the times are noisy.
"""

from __future__ import annotations

import argparse
import time

from _timing import best_time  # benchmarks/ is the script's folder, so on sys.path

from slipnet.crystal import slip_systems
from slipnet.forecast import forecast_crack
from slipnet.grains import build_grain_graph
from slipnet.synthetic import make_specimen


def measure(size: int, horizon: float, samples: int) -> dict:
    spec = make_specimen((size, size), 1.0, grain_size_um=25.0, seed=0)
    t0 = time.perf_counter()
    gg = build_grain_graph(spec.omap)
    t_graph = time.perf_counter() - t0
    tip, direction, load = (3.0, 0.5 * size), (1.0, 0.0), (0.0, 1.0, 0.0)
    systems = slip_systems("bcc")

    def run(n: int = 0):
        return forecast_crack(gg, tip, direction, load, horizon, systems=systems, mode="map", samples=n, seed=0)

    run(2)  # compile, per-graph set-up
    t_fc = best_time(run, 3)
    t0 = time.perf_counter()
    mc = run(samples)
    t_mc = (time.perf_counter() - t0 - t_fc) / max(samples, 1)
    assert len(mc.samples) == samples and len(mc.path) >= 2
    return {"size": size, "points": size * size, "grains": gg.n_grains, "graph_s": t_graph, "forecast_ms": t_fc * 1e3,
            "mc_ms_per_sample": t_mc * 1e3, "path_grains": int(mc.path["grain"].nunique())}


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--horizon", type=float, default=100.0, help="forecast horizon, µm (default 100)")
    ap.add_argument("--samples", type=int, default=20, help="Monte Carlo samples per map (default 20)")
    ap.add_argument("--large", action="store_true", help="add the 4000 × 4000 map")
    ap.add_argument("--csv", default=None, help="also write the table to this CSV file")
    args = ap.parse_args(argv)
    sizes = [250, 500, 1000, 2000] + ([4000] if args.large else [])
    measure(60, 20.0, 2)  # compile (or load) every kernel first: the 250² row is the reference
    rows = [measure(n, args.horizon, args.samples) for n in sizes]
    ref = rows[0]
    print(f"map mode, horizon {args.horizon:g} µm, {args.samples} Monte Carlo samples; ratios against {sizes[0]}²")
    print("| map | points | grains | graph (s) | ×250² | forecast (ms) | ×250² | MC per sample (ms) | ×250² |")
    print("|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        print(f"| {r['size']}² | {r['points']:,} | {r['grains']} | {r['graph_s']:.2f} "
              f"| {r['graph_s'] / ref['graph_s']:.1f} | {r['forecast_ms']:.1f} "
              f"| {r['forecast_ms'] / ref['forecast_ms']:.2f} | {r['mc_ms_per_sample']:.1f} "
              f"| {r['mc_ms_per_sample'] / ref['mc_ms_per_sample']:.2f} |")
    if args.csv:
        import pandas as pd

        pd.DataFrame(rows).to_csv(args.csv, index=False)
        print(f"written {args.csv}")


if __name__ == "__main__":
    main()
