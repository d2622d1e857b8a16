"""Cyclic crystal plasticity on notched specimens: implicit solver against the explicit one and the elastic solve.

Shaped like an asv benchmark (setup, parameters, a fixed seed), runnable as a plain script::

    python benchmarks/bench_cyclic.py [--sizes 128 256 512] [--no-explicit] [--amplitude 170]

Specimen: synthetic ferrite at 3 µm steps (30 µm grains), a 60 µm notch (10 µm root radius) from
the left edge, load across the notch; CRSS 90 MPa. For each size it prints, in the same run:

* ``elastic s``: one ``solve_elastic`` at the amplitude (tolerance 1e-5, as the cyclic increments);
* ``cyclic s``: ``solve_cyclic`` with the default settings, 3 cycles at R = −1 (the notch root
  yields), with its increments, Newton and CG iterations; ``cyclic/elastic`` (target ≤ 100 at 128²);
* at the first size, ``explicit s``: today's explicit ``solve_plastic`` ramped to the same peak
  load with its defaults (10 s ramp), ``ramp s``: ``solve_monotonic`` on the same ramp, and the
  ratios ``expl/ramp`` (same monotonic job; target ≥ 20) and ``expl/cyc`` (the whole 3-cycle
  run against the explicit monotonic ramp);
* peak resident memory of the process after each size (target < 4 GiB at 512²);
* a check that the work is real: accumulated slip is largest near the notch root.

Targets in wall time on a two-core laptop: 256² × 3 cycles < 2 min, 512² × 3 cycles < 10 min.
Numbers on a machine shared with other jobs are noisy.
"""

from __future__ import annotations

import argparse
import resource
import sys
import time

import numpy as np

from slipnet.grains import build_grain_graph
from slipnet.maps import NotchShape
from slipnet.stress import CyclicMaterial, solve_cyclic, solve_elastic, solve_monotonic
from slipnet.synthetic import make_specimen


class CyclicNotchBench:
    params = ((128, 256, 512),)

    def setup(self, n: int, seed: int = 1) -> None:
        self.spec = make_specimen((n, n), 3.0, grain_size_um=30.0,
                                  notch=NotchShape(depth_um=60.0, root_radius_um=10.0, opening_deg=45.0),
                                  notch_side="left", seed=seed)
        self.gg = build_grain_graph(self.spec.omap)

    def time_elastic(self, amplitude: float):
        return solve_elastic(self.spec.omap, self.spec.load_axis, amplitude, tol=1e-5, unindexed="auto")

    def time_cyclic(self, amplitude: float, free_edges=()):
        # periodic cell by default, as the elastic and explicit solvers see the map
        return solve_cyclic(self.spec.omap, self.spec.load_axis, stress_amplitude=amplitude, ratio=-1.0, cycles=3,
                            free_edges=free_edges, grains=self.gg, material=CyclicMaterial(crss_mpa=90.0))

    def time_ramp(self, amplitude: float):
        # the explicit solver's constitutive law (its defaults): linear hardening 200 MPa, latent ratio 1,
        # no backstress, n = 20, reference rate 1e-3 /s
        mat = CyclicMaterial(crss_mpa=90.0, voce_mpa=0.0, linear_hardening_mpa=200.0, latent_ratio=1.0,
                             backstress_modulus_mpa=0.0, backstress_recovery=0.0)
        return solve_monotonic(self.spec.omap, self.spec.load_axis, amplitude, load_time_s=10.0, grains=self.gg,
                               material=mat)

    def time_explicit(self, amplitude: float):
        from slipnet.stress.plasticity import explicit_plastic_reference as solve_plastic

        return solve_plastic(self.spec.omap, self.spec.load_axis, amplitude, crss_mpa=90.0, tol=1e-5,
                             unindexed="auto")


def _peak_gib() -> float:
    kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return kb / 2**20 if sys.platform != "darwin" else kb / 2**30


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", nargs="+", type=int, default=[128, 256, 512])
    ap.add_argument("--amplitude", type=float, default=170.0, help="stress amplitude, MPa (default 170)")
    ap.add_argument("--no-explicit", action="store_true", help="skip the explicit solver (slow)")
    args = ap.parse_args()
    bench = CyclicNotchBench()
    bench.setup(32)
    bench.time_cyclic(args.amplitude)  # compile / load the numba caches outside the timings
    bench.time_elastic(args.amplitude)
    print(f"{'grid':>8} {'elastic s':>9} {'cyclic s':>9} {'cyc/el':>7} {'incr':>5} {'Newton':>6} {'CG':>6} "
          f"{'explicit s':>10} {'ramp s':>7} {'expl/ramp':>9} {'expl/cyc':>8} {'peak GiB':>8} {'root/mean slip':>14}")
    for k, n in enumerate(args.sizes):
        bench.setup(n)
        t0 = time.perf_counter()
        bench.time_elastic(args.amplitude)
        t_el = time.perf_counter() - t0
        t0 = time.perf_counter()
        res = bench.time_cyclic(args.amplitude)
        t_cy = time.perf_counter() - t0
        x, y = bench.spec.omap.coordinates()
        rx, ry = bench.spec.notch_root
        near = (np.hypot(x - rx, y - ry) < 30.0) & ~res.compliant
        focus = res.accumulated_slip[near].mean() / res.accumulated_slip[~res.compliant].mean()
        assert focus > 2.0, "accumulated slip should concentrate at the notch root"
        t_ex = t_ramp = float("nan")
        if k == 0 and not args.no_explicit:
            t0 = time.perf_counter()
            ramp = bench.time_ramp(args.amplitude)
            t_ramp = time.perf_counter() - t0
            t0 = time.perf_counter()
            expl = bench.time_explicit(args.amplitude)
            t_ex = time.perf_counter() - t0
            # the same job: the accumulated slip of the two monotonic ramps agrees
            a, b = ramp.accumulated_slip, expl.accumulated_slip
            agree = float(np.linalg.norm(a - b) / np.linalg.norm(b))
            assert agree < 0.1, f"ramps disagree: relative L2 difference {agree:.3f}"

        s = res.settings
        if k == 0:
            t0 = time.perf_counter()
            free = bench.time_cyclic(args.amplitude, free_edges="left")
            t_free = time.perf_counter() - t0
            print(f"(same map with its notched edge free, free_edges='left': {t_free:.1f} s, "
                  f"{free.settings['increments']} increments, {t_free / t_el:.1f} x elastic)")
        print(f"{n:>4}x{n:<3} {t_el:>9.2f} {t_cy:>9.1f} {t_cy / t_el:>7.1f} {s['increments']:>5d} "
              f"{s['newton_iterations']:>6d} {s['cg_iterations']:>6d} {t_ex:>10.1f} {t_ramp:>7.2f} "
              f"{t_ex / t_ramp:>9.1f} {t_ex / t_cy:>8.1f} "
              f"{_peak_gib():>8.2f} {focus:>14.1f}", flush=True)
    print("targets: 128x128 cyclic/elastic <= 100 and explicit/implicit >= 20; 256x256 < 120 s; "
          "512x512 < 600 s and < 4 GiB")


if __name__ == "__main__":
    main()
