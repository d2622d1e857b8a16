"""Cubic disorientation angles of random orientation pairs: slipnet against orix and the memory floor.

Shaped like an asv benchmark (setup, parameters, a fixed seed), runnable as a plain script::

    python benchmarks/bench_disorientation.py [--pairs 2000000] [--orix-pairs 200000]

Prints, for the same pairs in the same run:

* slipnet's time (:func:`slipnet.crystal.disorientation_angle`, both cores, degrees out) and its
  ratio against orix's ``Orientation.angle_with`` with the proper cubic point group 432 (``O``,
  the 24 rotations slipnet reduces by; target ≥ 20× faster); orix is timed on a subset
  (``--orix-pairs``) and scaled per pair, because its symmetry expansion needs a lot of memory
  for millions of pairs;
* the memory floor, defined here as the time of a plain numpy copy (``np.copyto``, one core) of
  as many bytes as the call streams: both quaternion arrays in and the angle array out, 72 bytes
  per pair. slipnet ÷ floor has the target ≤ 5×;
* for comparison, the stricter read-only floor used before: ``np.add.reduce`` over the two input
  arrays (64 bytes per pair read, nothing written).
"""

from __future__ import annotations

import argparse

import numpy as np
from _timing import best_time  # benchmarks/ is the script's folder, so on sys.path

from slipnet.crystal import disorientation_angle, random_quats


class DisorientationBench:
    params = (1_000_000, 2_000_000)

    def setup(self, n: int, seed: int = 0) -> None:
        self.qa = random_quats(n, seed=seed)
        self.qb = random_quats(n, seed=seed + 1)
        disorientation_angle(self.qa[:10], self.qb[:10])  # compile outside the timing
        self._src = np.ones(9 * n)  # 72 bytes per pair: 32 + 32 in, 8 out
        self._dst = np.empty_like(self._src)

    def time_slipnet(self) -> np.ndarray:
        return disorientation_angle(self.qa, self.qb)

    def time_memory_floor(self) -> None:
        """Copy as many bytes as the call reads and writes (two (n, 4) float64 arrays and (n,) float64)."""
        np.copyto(self._dst, self._src)

    def time_read_floor(self) -> float:
        return float(np.add.reduce(self.qa, axis=None) + np.add.reduce(self.qb, axis=None))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pairs", type=int, nargs="*", default=list(DisorientationBench.params))
    parser.add_argument("--orix-pairs", type=int, default=100_000)
    args = parser.parse_args()

    from orix.quaternion import Orientation
    from orix.quaternion.symmetry import O

    for n in args.pairs:
        b = DisorientationBench()
        b.setup(n)
        t_ours = best_time(b.time_slipnet, repeat=5)
        t_floor = best_time(b.time_memory_floor, repeat=5)
        t_read = best_time(b.time_read_floor, repeat=5)
        angles = b.time_slipnet()
        assert angles.shape == (n,) and 40.0 < angles.mean() < 41.5  # real work: Mackenzie mean

        m = min(args.orix_pairs, n)
        oa = Orientation(b.qa[:m], symmetry=O)
        ob = Orientation(b.qb[:m], symmetry=O)
        t_orix_sub = best_time(lambda oa=oa, ob=ob: oa.angle_with(ob), repeat=2)
        ref = np.rad2deg(oa.angle_with(ob))
        max_diff = float(np.abs(ref - angles[:m]).max())
        t_orix = t_orix_sub * n / m
        print(
            f"pairs={n:>9,d}  slipnet {t_ours * 1e3:8.1f} ms  "
            f"orix (scaled from {m:,d}) {t_orix * 1e3:9.1f} ms  ratio orix/slipnet {t_orix / t_ours:7.1f}x  "
            f"memory floor (copy of 72 B/pair) {t_floor * 1e3:6.1f} ms  slipnet/floor {t_ours / t_floor:5.2f}x "
            f"(target <= 5x)  read-only floor {t_read * 1e3:6.1f} ms  slipnet/read floor {t_ours / t_read:5.2f}x  "
            f"max |diff| vs orix {max_diff:.2e} deg"
        )


if __name__ == "__main__":
    main()
