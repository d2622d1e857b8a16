"""Notch-placement sweep on the demo specimen: one worker process against two.

Shaped like an asv benchmark (setup, parameters, fixed seed), runnable as a plain script::

    python benchmarks/bench_notch.py                      # the issue's sizes: 41 x 31 and 200 x 100
    python benchmarks/bench_notch.py --sizes 20x10        # candidates x Monte Carlo samples

For each size it evaluates the same candidates (along the demo coupon's right edge, across its
load axis, × Monte Carlo samples) on two :class:`~slipnet.notch.sweep.SweepPool` s kept open side
by side, one of one worker process and one of two, checks that both give the identical plan
table, and prints:

* the start-up of each pool (process spawn, imports; paid once per study);
* the CPU time the workers got during the sweeps: the same work on one or two workers means no
  cost of the split, and the cores used on average show how much of the machine was free;
* the sweep time on each and the scaling ratio, time on one worker ÷ time on two (2 is perfect
  on a two-core machine; target ≥ 1.7×), with and without the start-up;
* the load average before and after (``os.getloadavg``).

The machine may be shared, and other jobs come and go: the candidates are therefore swept in
two halves in the order A B B A (half 1 on one worker, then on two; half 2 on two, then on
one), so a change of load during the run falls on both sides alike. The graph goes to each pool
once and stays there for both halves. The 200 × 100 size is 20,000 forecast + growth runs: about
an hour on one worker.
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np
import pandas as pd

from slipnet.grains import build_grain_graph
from slipnet.maps import NotchShape
from slipnet.notch import DEFAULT_WEIGHTS, PlanSettings, candidate_positions, finish_plan, plan_notch, run_sweep
from slipnet.notch.sweep import SweepPool
from slipnet.synthetic import demo_specimen


class NotchSweepBench:
    params = ((41, 31), (200, 100))

    def setup(self, candidates: int, samples: int, seed: int = 7) -> None:
        self.spec = demo_specimen(seed=seed)
        self.gg = build_grain_graph(self.spec.omap)
        _, _, y0, y1 = self.spec.omap.extent
        self.spacing = (y1 - y0) / candidates
        self.s = PlanSettings(
            load_axis=tuple(float(v) for v in self.spec.load_axis), stress_amplitude=200.0, stress_ratio=-1.0,
            notch=NotchShape(60.0, 15.0, 45.0), window_um=200.0, crack_sizes_um=(10.0,), strong_barrier=0.5,
            weights=dict(DEFAULT_WEIGHTS), target=None, samples=samples, orientation_noise_deg=1.5,
            load_misalignment_deg=2.0, position_error_um=5.0, seed=1, growth={}, concentration="peterson")
        self.candidates = candidate_positions(self.gg, "right", self.spacing, self.s.notch)

    def time_sweep(self, candidates, pool: SweepPool) -> list[dict]:
        return run_sweep(self.gg, candidates, self.s, pool=pool)

    def warm(self) -> None:
        """Compile / load this process's kernels (and fill the on-disk cache the workers read)."""
        plan_notch(self.gg, "right", self.s.load_axis, spacing_um=100.0, depth_um=60.0, root_radius_um=15.0,
                   opening_deg=45.0, window_um=200.0, crack_sizes_um=(10.0,), samples=1, seed=1)


def _process_cpu() -> float:
    return time.process_time()


def _worker_cpu(pool: SweepPool) -> float:
    """CPU seconds used so far by all worker processes of ``pool``."""
    return float(sum(pool.client.run(_process_cpu).values()))


def _load() -> str:
    return "load average " + ", ".join(f"{v:.2f}" for v in os.getloadavg())


def run(candidates: int, samples: int) -> None:
    b = NotchSweepBench()
    b.setup(candidates, samples)
    b.warm()
    print(f"{candidates} x {samples}: before: {_load()}", flush=True)
    halves = [list(h) for h in np.array_split(np.array(b.candidates, dtype=object), 2)]
    start, sweep, rows = {}, {1: 0.0, 2: 0.0}, {1: [], 2: []}
    with SweepPool("processes", workers=1) as one, SweepPool("processes", workers=2) as two:
        pools = {1: one, 2: two}
        for w in (1, 2):
            t0 = time.perf_counter()
            pools[w].start()
            start[w] = time.perf_counter() - t0
        cpu0 = {w: _worker_cpu(pools[w]) for w in (1, 2)}
        for half, order in zip(halves, ((1, 2), (2, 1)), strict=True):
            for w in order:
                t0 = time.perf_counter()
                rows[w] += b.time_sweep(half, pools[w])
                sweep[w] += time.perf_counter() - t0
        cpu = {w: _worker_cpu(pools[w]) - cpu0[w] for w in (1, 2)}
    tables = {w: finish_plan(sorted(rows[w], key=lambda r: r["candidate"]), b.s).table for w in (1, 2)}
    pd.testing.assert_frame_equal(tables[1], tables[2])
    t = tables[1]
    assert len(t) > 0 and t["valid"].any()  # real work: evaluated candidates
    runs = int(len(t) + t["valid"].sum() * samples)
    total = {w: start[w] + sweep[w] for w in (1, 2)}
    print(f"  candidates={len(t)} samples={samples} ({runs} forecast+growth runs), identical tables on 1 and 2 "
          "workers")
    print(f"  1 worker : start-up {start[1]:4.1f} s, sweep {sweep[1]:7.1f} s ({1e3 * sweep[1] / runs:.0f} ms per run)")
    print(f"  2 workers: start-up {start[2]:4.1f} s, sweep {sweep[2]:7.1f} s")
    print(f"  CPU time the workers got: {cpu[1]:.1f} s on 1 worker, {cpu[2]:.1f} s on 2 (the same work; "
          f"2 workers used {cpu[2] / sweep[2]:.2f} cores on average, 1 worker {cpu[1] / sweep[1]:.2f})")
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
