"""Synthetic specimen generation: whole-map time, and power-cell assignment against scipy's cKDTree.

Shaped like an asv benchmark (setup, parameters, a fixed seed), runnable as a plain script::

    python benchmarks/bench_synthetic.py [--sizes 1000 2000] [--large 4000]

Prints, for each square map of ``n × n`` points at 1 µm step with 20 µm grains:

* the time of :func:`slipnet.synthetic.make_specimen` (target: 1000 × 1000 in a few seconds) and
  the peak resident memory of the process;
* the time of the power-cell assignment (numba bucket search) against the same assignment by a
  nearest-neighbour query of scipy's ``cKDTree`` in the lifted 3-D space (``workers=-1``), on the
  same points and seeds in the same run, and a check that both give the same cells.

``--large N`` also builds one ``N × N`` map (e.g. 4000) to show the memory stays bounded.
"""

from __future__ import annotations

import argparse
import math
import resource
import time

import numpy as np
from scipy.spatial import cKDTree

from slipnet.synthetic import make_specimen
from slipnet.synthetic._geometry import _grid_xy, _power_cells


def peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


class SyntheticBench:
    params = (1000, 2000)

    def setup(self, n: int, seed: int = 0) -> None:
        make_specimen((40, 40), 1.0, seed=seed)  # compile the kernels outside the timing
        self.n = n
        rng = np.random.default_rng(seed)
        d = 20.0
        self.lo, self.hi = np.array([-1.5 * d, -1.5 * d]), np.array([n + 1.5 * d, n + 1.5 * d])
        k = int(np.prod(self.hi - self.lo) / (0.25 * math.pi * d * d))
        self.centres = rng.uniform(self.lo, self.hi, (k, 2))
        self.w = (0.3 * d * rng.random(k)) ** 2
        self.d = d

    def time_make_specimen(self):
        return make_specimen((self.n, self.n), 1.0, grain_size_um=self.d, seed=1)

    def time_power_cells(self) -> np.ndarray:
        return _power_cells((self.n, self.n), 1.0, "square", self.centres, self.w, self.lo, self.hi, self.d)

    def time_ckdtree(self) -> np.ndarray:
        tree = cKDTree(np.column_stack([self.centres, np.sqrt(self.w.max() - self.w)]))
        out = np.empty((self.n, self.n), dtype=np.int64)
        rows_per = max(1, (1 << 18) // self.n)
        for r0 in range(0, self.n, rows_per):
            rows = np.arange(r0, min(self.n, r0 + rows_per))
            x, y = _grid_xy(rows, self.n, 1.0, "square")
            pts = np.column_stack([x.ravel(), y.ravel(), np.zeros(x.size)])
            out[rows] = tree.query(pts, k=1, workers=-1)[1].reshape(rows.size, self.n)
        return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="*", default=list(SyntheticBench.params))
    parser.add_argument("--large", type=int, default=0, help="also build one map of this many points a side")
    args = parser.parse_args()
    for n in args.sizes:
        b = SyntheticBench()
        b.setup(n)
        t0 = time.perf_counter()
        spec = b.time_make_specimen()
        t_make = time.perf_counter() - t0
        t0 = time.perf_counter()
        ours = b.time_power_cells()
        t_ours = time.perf_counter() - t0
        t0 = time.perf_counter()
        ref = b.time_ckdtree()
        t_ref = time.perf_counter() - t0
        same = np.array_equal(ours, ref)
        print(f"{n} x {n}: make_specimen {t_make:.2f} s ({spec.n_grains} grains); power cells {t_ours:.2f} s vs "
              f"cKDTree {t_ref:.2f} s: {t_ref / t_ours:.1f}x faster, identical cells: {same}; "
              f"peak RSS {peak_mib():.0f} MiB")
    if args.large:
        t0 = time.perf_counter()
        spec = make_specimen((args.large, args.large), 1.0, grain_size_um=20.0, seed=1)
        size = (spec.omap.quats.nbytes + spec.omap.quality.nbytes + spec.omap.phase.nbytes
                + spec.truth_labels.nbytes) / 2**20
        print(f"{args.large} x {args.large}: make_specimen {time.perf_counter() - t0:.1f} s, {spec.n_grains} grains, "
              f"result arrays {size:.0f} MiB, peak RSS {peak_mib():.0f} MiB")


if __name__ == "__main__":
    main()
