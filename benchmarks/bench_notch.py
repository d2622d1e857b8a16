"""Notch-placement sweep on the demo specimen: one worker process against two.

Shaped like an asv benchmark (setup, parameters, fixed seed), runnable as a plain script::

    python benchmarks/bench_notch.py                      # the issue's sizes: 41 x 31 and 200 x 100
    python benchmarks/bench_notch.py --sizes 20x10        # candidates x Monte Carlo samples

For each size it times the same sweep (candidates along the demo coupon's right edge, across its
load axis, × Monte Carlo samples) on a :class:`~slipnet.notch.sweep.SweepPool` of one worker
process and on one of two, checks that both give the identical table, and prints:

* the scaling ratio, time on one worker ÷ time on two (2 is perfect on a two-core machine;
  target ≥ 1.7×), counted from the moment the pool is created, so the workers' start-up
  (process spawn, imports, the graph sent to each worker) is inside it, as a user waits for it;
* the same ratio of the sweeps alone, and the start-up itself;
* the cost of a second sweep on the same pool (the workers and the graph are reused: no start-up);
* the load average before and after (``os.getloadavg``): the machine may be shared, and a ratio
  measured while other jobs hold a core is not the code's.

The 200 × 100 size is 20,000 forecast + growth runs: tens of minutes on one worker.
"""

from __future__ import annotations

import argparse
import os
import time

import pandas as pd

from slipnet.grains import build_grain_graph
from slipnet.notch import plan_notch
from slipnet.notch.sweep import SweepPool
from slipnet.synthetic import demo_specimen


class NotchSweepBench:
    params = ((41, 31), (200, 100))

    def setup(self, candidates: int, samples: int, seed: int = 7) -> None:
        self.spec = demo_specimen(seed=seed)
        self.gg = build_grain_graph(self.spec.omap)
        _, _, y0, y1 = self.spec.omap.extent
        self.spacing = (y1 - y0) / candidates
        self.samples = samples

    def time_sweep(self, pool: SweepPool | None = None, *, samples: int | None = None,
                   spacing: float | None = None) -> pd.DataFrame:
        return plan_notch(self.gg, "right", self.spec.load_axis, spacing_um=spacing or self.spacing, depth_um=60.0,
                          root_radius_um=15.0, opening_deg=45.0, window_um=200.0, crack_sizes_um=(10.0,),
                          samples=self.samples if samples is None else samples, seed=1, pool=pool).table


def _load() -> str:
    return "load average " + ", ".join(f"{v:.2f}" for v in os.getloadavg())


def run(candidates: int, samples: int) -> None:
    b = NotchSweepBench()
    b.setup(candidates, samples)
    # compile / load this process's kernels (and fill the on-disk cache the workers read) outside the timing
    b.time_sweep(samples=1, spacing=100.0)
    print(f"{candidates} x {samples}: before: {_load()}", flush=True)
    total, sweep, start, again, tables = {}, {}, {}, {}, {}
    for w in (1, 2):
        t0 = time.perf_counter()
        with SweepPool("processes", workers=w) as pool:
            pool.start()
            t1 = time.perf_counter()
            tables[w] = b.time_sweep(pool)
            t2 = time.perf_counter()
            b.time_sweep(pool, samples=0)  # a second, small sweep on the same workers and graph
            again[w] = time.perf_counter() - t2
        total[w], sweep[w], start[w] = t2 - t0, t2 - t1, t1 - t0
    pd.testing.assert_frame_equal(tables[1], tables[2])
    n = len(tables[1])
    assert n > 0 and tables[1]["valid"].any()  # real work: evaluated candidates
    runs = int(n + tables[1]["valid"].sum() * samples)
    print(f"  candidates={n} samples={samples} ({runs} forecast+growth runs), identical tables on 1 and 2 workers")
    print(f"  1 worker : {total[1]:7.1f} s = start-up {start[1]:4.1f} s + sweep {sweep[1]:7.1f} s "
          f"({1e3 * sweep[1] / runs:.0f} ms per run); second sweep (nominal only) {again[1]:.1f} s")
    print(f"  2 workers: {total[2]:7.1f} s = start-up {start[2]:4.1f} s + sweep {sweep[2]:7.1f} s; "
          f"second sweep (nominal only) {again[2]:.1f} s")
    print(f"  scaling ratio 1 worker / 2 workers: {total[1] / total[2]:.2f}x with start-up, "
          f"{sweep[1] / sweep[2]:.2f}x sweeps alone (target >= 1.7x, ideal 2.0)")
    print(f"  after: {_load()}", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", nargs="*", default=[f"{c}x{s}" for c, s in NotchSweepBench.params],
                        help="candidates x samples, e.g. 41x31 200x100")
    args = parser.parse_args()
    for size in args.sizes:
        c, s = (int(v) for v in size.lower().split("x"))
        run(c, s)


if __name__ == "__main__":
    main()
