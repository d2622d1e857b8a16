"""Full-field elastic stress solve: slipnet's spectral solver against its FFTs and a plain numpy version.

Shaped like an asv benchmark (setup, parameters, a fixed seed), runnable as a plain script::

    python benchmarks/bench_stress.py [--sizes 256 512] [--workers 2]

For each square polycrystal (synthetic, random texture, ~20 points per grain diameter, fully
indexed, load along y) it prints, in the same run:

* iterations and wall time of ``solve_elastic`` to a 1e-6 residual (set-up included). Target for
  512²: under 3 s on two cores.
* time of one CG iteration (stiffness product, forward and inverse real FFTs of six components,
  projection, vector updates) divided by the time of the FFTs alone that the iteration needs (the
  same ``scipy.fft.rfftn``/``irfftn`` calls on the same arrays). Target: within 3×.
* the time of a straightforward numpy implementation of the same scheme (Galerkin projection +
  CG, ``numpy.fft``, ``einsum`` for the stiffness product, array expressions for the projection),
  run for the same number of iterations from the same start; its result is checked against the
  library's (so both do the same work) and the ratio of times per iteration is printed.

Numbers on a 2-core machine shared with other jobs are noisy: best of a few repeats.
"""

from __future__ import annotations

import argparse
import math

import numpy as np
import scipy.fft
from _timing import best_time  # benchmarks/ is the script's folder, so on sys.path

from slipnet.stress import _kernels as _k
from slipnet.stress import solve_elastic, to_mandel
from slipnet.stress._threads import _numba_threads
from slipnet.stress.elastic import _prepare, _Spectral
from slipnet.synthetic import make_specimen


def setup(n: int, seed: int = 0):
    spec = make_specimen((n, n), 1.0, grain_size_um=20.0, unindexed_fraction=0.0, noise_deg=0.5, seed=seed)
    return spec.omap


# ---------------------------------------------------------------------------- numpy reference
def numpy_project(field: np.ndarray, kvec: np.ndarray, kind: np.ndarray, shape) -> np.ndarray:
    """Same projection as the kernel, written with numpy array expressions."""
    ny, nx = shape
    spec = np.fft.rfftn(field.reshape(6, ny, nx), axes=(1, 2))
    n1, n2 = kvec[0], kvec[1]
    c1, c2 = n1.conj(), n2.conj()
    r = 1.0 / math.sqrt(2.0)
    t11, t22, t23, t13, t12 = spec[0], spec[1], spec[3] * r, spec[4] * r, spec[5] * r
    v1 = t11 * c1 + t12 * c2
    v2 = t12 * c1 + t22 * c2
    v3 = t13 * c1 + t23 * c2
    s = n1 * v1 + n2 * v2
    a1, a2, a3 = 2 * v1 - c1 * s, 2 * v2 - c2 * s, 2 * v3
    out = np.stack([n1 * a1, n2 * a2, np.zeros_like(a1), math.sqrt(2) * 0.5 * n2 * a3,
                    math.sqrt(2) * 0.5 * n1 * a3, math.sqrt(2) * 0.5 * (n1 * a2 + a1 * n2)])
    keep = kind == 1
    out[:, keep] = spec[:, keep]
    out[:, kind == 2] = 0.0
    return np.fft.irfftn(out, s=(ny, nx), axes=(1, 2)).reshape(6, -1)


def numpy_cg(c: np.ndarray, kvec, kind, shape, b: np.ndarray, x: np.ndarray, n_iter: int) -> np.ndarray:
    """Plain CG on G(C:x) = b for a fixed number of iterations (same start, same arithmetic)."""

    def apply(e):
        return numpy_project(np.einsum("pab,bp->ap", c, e), kvec, kind, shape)

    x = x.copy()
    r = b - apply(x)
    p = r.copy()
    rr = float(np.sum(r * r))
    for _ in range(n_iter):
        ap = apply(p)
        alpha = rr / float(np.sum(p * ap))
        x += alpha * p
        r -= alpha * ap
        rr_new = float(np.sum(r * r))
        p = r + (rr_new / rr) * p
        rr = rr_new
    return x


def library_cg(op: _Spectral, b: np.ndarray, x: np.ndarray, n_iter: int) -> np.ndarray:
    """The library's CG steps for a fixed number of iterations (no convergence test)."""
    x = x.copy()
    r = b - op.apply(x)
    p = np.zeros_like(r)
    rr = _k.dot(r, r)
    beta = 0.0
    for _ in range(n_iter):
        pap = _k.direction_stiffness(op.c, p, r, beta, op._sig)
        ap = op.project(op._sig)
        rr_new = _k.cg_update(x, r, p, ap, rr / pap)
        beta = rr_new / rr
        rr = rr_new
    return x


def run(n: int, workers: int) -> dict:
    omap = setup(n)
    axis = (0.0, 1.0, 0.0)
    solve_elastic(omap, axis, tol=1e-6, workers=workers)  # compile / warm caches
    field = None

    def solve():
        nonlocal field
        field = solve_elastic(omap, axis, tol=1e-6, workers=workers)

    t_solve = best_time(solve, 2)
    its = field.iterations
    assert field.residual <= 1e-6

    with _numba_threads(workers):
        c, *_ = _prepare(omap, None, 1e-3, "compliant")
        op = _Spectral(c, omap.shape, (omap.row_spacing, omap.step), "rotated", workers)
        sig = to_mandel(100.0 * np.outer(axis, axis))
        b = np.repeat(sig[:, None], op.n, axis=1)
        x0 = np.repeat(np.linalg.solve(c.mean(axis=0), sig)[:, None], op.n, axis=1)
        k = 10
        t_lib = best_time(lambda: library_cg(op, b, x0, k), 3) / (k + 1)  # k iterations + the start residual
        f = np.random.default_rng(0).random((6, n, n))
        spec = scipy.fft.rfftn(f, axes=(1, 2), workers=workers)

        def ffts():
            s = scipy.fft.rfftn(f, axes=(1, 2), workers=workers)
            scipy.fft.irfftn(s, s=(n, n), axes=(1, 2), workers=workers)

        t_fft = best_time(ffts, 5)
        del spec
        x_lib = library_cg(op, b, x0, k)
    t_np = best_time(lambda: numpy_cg(c, op.kvec, op.kind, omap.shape, b, x0, k), 2) / (k + 1)
    x_np = numpy_cg(c, op.kvec, op.kind, omap.shape, b, x0, k)
    agree = float(np.abs(x_np - x_lib).max() / np.abs(x_lib).max())
    assert agree < 1e-8, f"numpy reference and library disagree ({agree:.2e})"
    return {"n": n, "iterations": its, "t_solve": t_solve, "t_iter": t_lib, "t_fft": t_fft, "t_numpy": t_np,
            "agree": agree}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", nargs="+", type=int, default=[256, 512])
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    print(f"{'grid':>8} {'iters':>6} {'solve s':>8} {'iter ms':>8} {'FFT ms':>8} {'iter/FFT':>9} "
          f"{'numpy ms':>9} {'numpy/lib':>10}")
    for n in args.sizes:
        r = run(n, args.workers)
        print(f"{n:>4}x{n:<3} {r['iterations']:>6d} {r['t_solve']:>8.2f} {1e3 * r['t_iter']:>8.1f} "
              f"{1e3 * r['t_fft']:>8.1f} {r['t_iter'] / r['t_fft']:>9.2f} {1e3 * r['t_numpy']:>9.1f} "
              f"{r['t_numpy'] / r['t_iter']:>10.2f}")
    print("targets: 512x512 solve < 3 s on two cores; iteration / FFT <= 3")


if __name__ == "__main__":
    main()
