"""Notch-placement sweep on the demo specimen: one worker against two.

Shaped like an asv benchmark (setup, parameters, fixed seed), runnable as a plain script::

    python benchmarks/bench_notch.py [--candidates 200] [--samples 100] [--scheduler processes]

Times the same sweep (candidates along the demo coupon's right edge, across its load axis,
× Monte Carlo samples) with one worker and with two, checks that both give the identical table,
and prints the scaling ratio (time on one worker ÷ time on two; 2 is perfect on a two-core
machine). The issue's full size is 200 × 100; pass smaller numbers for a quick look.
"""

from __future__ import annotations

import argparse
import time

import pandas as pd

from slipnet.grains import build_grain_graph
from slipnet.notch import plan_notch
from slipnet.synthetic import demo_specimen


class NotchSweepBench:
    params = ((200, 100),)

    def setup(self, candidates: int, samples: int, seed: int = 7) -> None:
        self.spec = demo_specimen(seed=seed)
        self.gg = build_grain_graph(self.spec.omap)
        _, _, y0, y1 = self.spec.omap.extent
        self.spacing = (y1 - y0) / candidates
        self.samples = samples

    def time_sweep(self, workers: int, scheduler: str) -> pd.DataFrame:
        return plan_notch(self.gg, "right", self.spec.load_axis, spacing_um=self.spacing, depth_um=60.0,
                          root_radius_um=15.0, opening_deg=45.0, window_um=200.0, crack_sizes_um=(10.0,),
                          samples=self.samples, seed=1, scheduler=scheduler, workers=workers)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--candidates", type=int, default=200)
    parser.add_argument("--samples", type=int, default=100)
    parser.add_argument("--scheduler", default="processes", choices=["processes", "threads"])
    args = parser.parse_args()
    b = NotchSweepBench()
    b.setup(args.candidates, args.samples)
    b.time_sweep(1, "synchronous")  # warm caches and compiled kernels outside the timing
    times, tables = {}, {}
    for w in (1, 2):
        t0 = time.perf_counter()
        tables[w] = b.time_sweep(w, args.scheduler).table
        times[w] = time.perf_counter() - t0
    pd.testing.assert_frame_equal(tables[1], tables[2])
    n = len(tables[1])
    assert n > 0 and tables[1]["valid"].any()  # real work: evaluated candidates
    evals = n * (1 + args.samples)
    print(f"candidates={n} samples={args.samples} scheduler={args.scheduler}: "
          f"1 worker {times[1]:.1f} s ({1e3 * times[1] / evals:.0f} ms per forecast+growth), "
          f"2 workers {times[2]:.1f} s; scaling ratio {times[1] / times[2]:.2f}x (ideal 2.0); identical tables")


if __name__ == "__main__":
    main()
