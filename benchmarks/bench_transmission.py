"""Slip transmission over every boundary of a grain graph: the whole table against its kernel.

Shaped like an asv benchmark (setup, parameters, a fixed seed), runnable as a plain script::

    python benchmarks/bench_transmission.py [--seeds 20000] [--size 1000]

On a Voronoi map (``--size``² points, ``--seeds`` grains, random orientations; about 2.8
boundaries per grain) it times, in the same run:

* :func:`slipnet.slip.transmission_table`: everything a caller waits for, from the grain graph to
  the finished two-rows-per-boundary DataFrame (structure mask, Schmid factors, boundary-plane
  normals, the kernel, the table);
* its kernel alone, ``boundary_summary_rows`` (m′, transmission score, residual Burgers vector
  and Shen factor of every boundary and direction), on inputs prepared outside the timing;

and prints the ratio table ÷ kernel (target ≤ 1.5×: the Python around the kernel costs at most
half the kernel). It also times :func:`slipnet.forecast.rank_barriers` on 10⁵ crossings of
random boundaries (no target; it used to be a loop over crossings).
"""

from __future__ import annotations

import argparse

import numpy as np
import pandas as pd
from _timing import best_time  # benchmarks/ is the script's folder, so on sys.path
from bench_grains import voronoi_map

from slipnet.crystal import _slip_kernels as K
from slipnet.crystal import boundary_plane_normals, effective_schmid, schmid_factors, slip_systems
from slipnet.forecast.barriers import rank_barriers
from slipnet.grains import build_grain_graph
from slipnet.slip import transmission_table

LOAD = (0.6, 0.8, 0.0)


class TransmissionBench:
    params = ((1000, 20000),)

    def setup(self, size: int, seeds: int, seed: int = 0) -> None:
        self.gg = build_grain_graph(voronoi_map(size, size, seeds, seed))
        self.systems = slip_systems(self.gg.omap.phases[0].structure)
        # the kernel's inputs, prepared as transmission_summaries prepares them
        q = np.ascontiguousarray(self.gg.mean_quats)
        b = self.gg.boundaries
        f = schmid_factors(q, LOAD, self.systems)
        eff = np.ascontiguousarray(effective_schmid(f, self.systems))
        n_b = len(b)
        ga = np.ascontiguousarray(b["grain_a"].to_numpy(np.int64))
        gb = np.ascontiguousarray(b["grain_b"].to_numpy(np.int64))
        gbn = np.ascontiguousarray(boundary_plane_normals(b["trace_angle_deg"].to_numpy(), 90.0))
        self.args = (
            q, ga, gb, eff, np.ascontiguousarray(eff.argmax(axis=1).astype(np.int64)), self.systems.normals,
            self.systems.directions, gbn,
            np.full(n_b, self.systems.burgers_length * 0.2866), 1.0 / self.systems.max_effective,
            np.empty((n_b, 2)), np.empty((n_b, 2), np.int64), np.empty((n_b, 2)), np.empty((n_b, 2), np.int64),
            np.empty((n_b, 2)), np.empty((n_b, 2)), np.empty(n_b),
        )
        self.time_table()  # compile / load outside the timing
        self.time_kernel()

    def time_table(self) -> pd.DataFrame:
        return transmission_table(self.gg, LOAD, self.systems)

    def time_kernel(self) -> None:
        K.boundary_summary_rows(*self.args)


def crossings(n: int, seed: int = 0) -> pd.DataFrame:
    """``n`` crossings of random boundaries by 8 branches (repeats included), as the forecast lists them."""
    rng = np.random.default_rng(seed)
    ga = rng.integers(0, n // 4, n)
    gb = ga + rng.integers(1, 6, n)
    return pd.DataFrame({
        "boundary_id": ga * 8 + (gb - ga), "grain_a": ga, "grain_b": gb, "twist_deg": rng.uniform(0, 90, n),
        "tilt_deg": rng.uniform(0, 90, n), "m_prime": rng.uniform(0, 1, n), "schmid_in": rng.uniform(0, 0.5, n),
        "schmid_out": rng.uniform(0, 0.5, n), "distance_um": rng.uniform(0, 500, n),
        "boundary_class": rng.choice(["high_angle", "low_angle", "sigma3", "sigma9"], n),
        "misorientation_deg": rng.uniform(1, 60, n), "x_um": rng.uniform(0, 500, n), "y_um": rng.uniform(0, 500, n),
        "branch": rng.integers(0, 8, n),
    })


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=1000)
    parser.add_argument("--seeds", type=int, default=20000)
    args = parser.parse_args()
    b = TransmissionBench()
    b.setup(args.size, args.seeds)
    t_table = best_time(b.time_table, repeat=7)
    t_kernel = best_time(b.time_kernel, repeat=7)
    table = b.time_table()
    n_b = len(b.gg.boundaries)
    assert len(table) == 2 * n_b and table["m_prime"].between(0, 1).all()  # real work on every boundary
    print(f"map {args.size} x {args.size}: {b.gg.n_grains} grains, {n_b} boundaries, {len(b.systems)} systems")
    print(f"  transmission_table     {t_table * 1e3:8.1f} ms  ({1e6 * t_table / n_b:.2f} µs per boundary)")
    print(f"  boundary_summary_rows  {t_kernel * 1e3:8.1f} ms  (the kernel alone)")
    print(f"  ratio table / kernel   {t_table / t_kernel:8.2f}x  (target <= 1.5x)")
    cr = crossings(100_000)
    rank_barriers(cr.iloc[:10])
    t_rank = best_time(lambda: rank_barriers(cr), repeat=5)
    print(f"  rank_barriers, 100000 crossings: {t_rank * 1e3:.1f} ms ({1e6 * t_rank / len(cr):.2f} µs per crossing)")


if __name__ == "__main__":
    main()
