"""Schmid factors and m′ boundary summaries: slipnet's kernels against a plain numpy einsum version.

Shaped like an asv benchmark (setup, parameters, a fixed seed), runnable as a plain script::

    python benchmarks/bench_slip.py [--points 10000000] [--boundaries 100000] [--ref-fraction 0.1]

Prints, for the same data in the same run:

* Schmid factors of 10⁷ orientations × 48 BCC systems (float32 output, 1.9 GB) and the reducing
  per-point summary, against a numpy version (quaternion rotation of the load axis, then two
  ``einsum`` contractions with the normals and directions and a product). The einsum reference runs
  on ``--ref-fraction`` of the points (its float64 temporaries would need ~11 GB for 10⁷) and is
  scaled per point. Target ≥ 5× faster.
* m′ summaries for 10⁵ boundaries × 48 × 48 system pairs, against numpy: sample-frame normals and
  directions by ``einsum``, the full (b, 48, 48) |m′| array by two batched ``einsum`` products (in
  chunks of 10⁴ boundaries), then max / argmax reductions. Target ≥ 5× faster.
* The arithmetic floor of each case: its flop count divided by the float64 flop rate of a large
  numpy matrix product measured in the same run (2 cores shared with other jobs: noisy).
"""

from __future__ import annotations

import argparse

import numpy as np
from _timing import best_time  # benchmarks/ is the script's folder, so on sys.path

from slipnet.crystal import (
    effective_schmid,
    matrix_from_quat,
    random_quats,
    schmid_factors,
    schmid_summary,
    slip_systems,
    transmission_summaries,
)


def matmul_peak(n: int = 3000) -> float:
    """float64 flop rate of numpy's matrix product (flop/s), best of 3."""
    rng = np.random.default_rng(0)
    a, b = rng.random((n, n)), rng.random((n, n))
    t = best_time(lambda: a @ b)
    return 2.0 * n**3 / t


def numpy_schmid(q: np.ndarray, load: np.ndarray, normals: np.ndarray, directions: np.ndarray) -> np.ndarray:
    """The straightforward numpy version: rotate l into each crystal, then two einsums."""
    w, v = q[:, :1], q[:, 1:]
    t = 2.0 * np.cross(v, load)
    lc = load + w * t + np.cross(v, t)
    return np.einsum("ni,si->ns", lc, normals) * np.einsum("ni,si->ns", lc, directions)


def numpy_mprime_summaries(q, ga, gb, eff, normals, directions, chunk: int = 10_000):
    """Full |m′| per boundary with einsum, then the same summaries as the kernel (A→B side + max)."""
    g = matrix_from_quat(q)
    ns = np.einsum("gji,sj->gsi", g, normals)  # gᵀ n per grain, sample frame
    ds = np.einsum("gji,sj->gsi", g, directions)
    in_sys = eff.argmax(axis=1)
    out_max = np.empty(ga.size)
    out_in = np.empty(ga.size)
    out_j = np.empty(ga.size, np.int64)
    for s in range(0, ga.size, chunk):
        a, b = ga[s:s + chunk], gb[s:s + chunk]
        m = np.abs(np.einsum("bsi,bti->bst", ns[a], ns[b]) * np.einsum("bsi,bti->bst", ds[a], ds[b]))
        out_max[s:s + chunk] = m.max(axis=(1, 2))
        row = m[np.arange(a.size), in_sys[a]]
        out_j[s:s + chunk] = row.argmax(axis=1)
        out_in[s:s + chunk] = row.max(axis=1)
    return out_max, out_in, out_j


class SchmidBench:
    params = (10_000_000,)

    def setup(self, n: int, seed: int = 0) -> None:
        self.systems = slip_systems("bcc", "all")
        self.q = random_quats(n, seed=seed)
        self.load = np.array([0.6, 0.8, 0.0])
        self.out = np.empty((n, len(self.systems)), np.float32)
        schmid_factors(self.q[:10], self.load, self.systems)  # compile outside the timing
        schmid_factors(self.q[:10], self.load, self.systems, dtype=np.float32)
        schmid_summary(self.q[:10], self.load, self.systems)

    def time_factors(self):
        return schmid_factors(self.q, self.load, self.systems, dtype=np.float32, out=self.out)

    def time_summary(self):
        return schmid_summary(self.q, self.load, self.systems)


class MPrimeBench:
    params = (100_000,)

    def setup(self, n: int, seed: int = 1) -> None:
        self.systems = slip_systems("bcc", "all")
        rng = np.random.default_rng(seed)
        self.q = random_quats(n, seed=seed)
        self.ga = rng.integers(0, n, n)
        self.gb = (self.ga + 1 + rng.integers(0, n - 1, n)) % n
        self.f = schmid_factors(self.q, [1.0, 0.0, 0.0], self.systems)
        transmission_summaries(self.q, self.ga[:10], self.gb[:10], self.systems, factors=self.f)

    def time_kernel(self):
        return transmission_summaries(self.q, self.ga, self.gb, self.systems, factors=self.f)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=SchmidBench.params[0])
    parser.add_argument("--boundaries", type=int, default=MPrimeBench.params[0])
    parser.add_argument("--ref-fraction", type=float, default=0.1)
    args = parser.parse_args()

    peak = matmul_peak()
    print(f"measured float64 matmul rate: {peak / 1e9:.1f} GFLOP/s")

    # ------------------------------------------------------------------ Schmid factors
    b = SchmidBench()
    b.setup(args.points)
    ns = len(b.systems)
    t_k = best_time(b.time_factors)
    t_s = best_time(b.time_summary)
    n_ref = max(1000, int(args.points * args.ref_fraction))
    qr = b.q[:n_ref]
    ref = numpy_schmid(qr, b.load, b.systems.normals, b.systems.directions)
    np.testing.assert_allclose(b.out[:n_ref], ref, atol=1e-6)  # real work, same numbers
    del ref
    load, nrm, drc = b.load, b.systems.normals, b.systems.directions
    t_ref = best_time(lambda: numpy_schmid(qr, load, nrm, drc), repeat=2)
    t_ref *= args.points / n_ref
    flops = args.points * (30 + 11 * ns)
    floor = flops / peak
    print(f"\nSchmid factors, {args.points:.0e} points x {ns} systems (float32 output):")
    print(f"  slipnet kernel        {t_k:8.3f} s   {t_ref / t_k:6.1f}x faster than numpy einsum "
          f"({t_ref:.2f} s, scaled from {n_ref:.0e} points)")
    print(f"  slipnet summary       {t_s:8.3f} s   {t_ref / t_s:6.1f}x faster (max/argmax/runner-up/effective, "
          f"no (n, {ns}) array)")
    print(f"  arithmetic floor      {floor:8.3f} s   ({flops / 1e9:.1f} GFLOP at the matmul rate); kernel is "
          f"{t_k / floor:.1f}x the floor, summary {t_s / floor:.1f}x")
    print(f"  output written        {b.out.nbytes / 1e9:.2f} GB -> {b.out.nbytes / t_k / 1e9:.1f} GB/s")
    del b

    # ------------------------------------------------------------------ m′ summaries
    m = MPrimeBench()
    m.setup(args.boundaries)
    s = m.systems
    t_k = best_time(m.time_kernel)
    res = m.time_kernel()
    eff = effective_schmid(m.f, s)
    n_ref = max(1000, int(args.boundaries * min(1.0, 10 * args.ref_fraction)))
    ref_max, ref_in, _ = numpy_mprime_summaries(m.q, m.ga[:n_ref], m.gb[:n_ref], eff, s.normals, s.directions)
    np.testing.assert_allclose(res["m_prime_max"][:n_ref], ref_max, atol=1e-9)
    np.testing.assert_allclose(res["m_prime"][:n_ref, 0], ref_in, atol=1e-9)
    t_ref = best_time(lambda: numpy_mprime_summaries(m.q, m.ga[:n_ref], m.gb[:n_ref], eff, s.normals,
                                                     s.directions), repeat=2) * args.boundaries / n_ref
    ns = len(s)
    flops = args.boundaries * (11 * ns**2 + 56 * ns + 45)  # all pairs + rotating B's systems + both rows
    print(f"\nm′ summaries, {args.boundaries:.0e} boundaries x {ns} x {ns} pairs, both directions:")
    print(f"  slipnet kernel        {t_k:8.3f} s   {t_ref / t_k:6.1f}x faster than numpy einsum "
          f"({t_ref:.2f} s, scaled from {n_ref:.0e} boundaries)")
    print(f"  arithmetic floor      {flops / peak:8.3f} s   ({flops / 1e9:.2f} GFLOP at the matmul rate); kernel is "
          f"{t_k / (flops / peak):.1f}x the floor")

if __name__ == "__main__":
    main()
