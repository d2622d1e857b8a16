"""The serial and the parallel copy of every sized kernel give the same numbers, bit for bit.

:mod:`slipnet.sized_kernels` picks the copy by the size of a call, so a result must not depend on
which one ran. Each public function below runs once with every sized kernel forced serial and once
forced parallel; the outputs are compared with ``np.array_equal`` (NaN equal to NaN). The last test
checks that these calls reached both copies of every sized kernel of the modules listed.
"""

from __future__ import annotations

import importlib
from contextlib import contextmanager

import numpy as np
import pytest

from slipnet.crystal import (
    disorientation,
    disorientation_angle,
    euler_from_quat,
    matrix_from_quat,
    nearest_equivalent,
    quat_from_euler,
    quat_from_matrix,
    quat_multiply,
    quat_rotate,
    random_quats,
    reduce_cubic,
)
from slipnet.crystal.slip_systems import resolved_shear, schmid_factors, schmid_summary, slip_systems, trace_geometry
from slipnet.sized_kernels import SizedKernel, kernel_input

MODULES = ("slipnet.crystal.orientation_kernels", "slipnet.crystal._slip_kernels", "slipnet.stress._kernels",
           "slipnet.synthetic._kernels")


def _sized() -> dict[str, SizedKernel]:
    out = {}
    for name in MODULES:
        mod = importlib.import_module(name)
        out.update({f"{name}.{k}": v for k, v in vars(mod).items() if isinstance(v, SizedKernel)})
    return out


@contextmanager
def _forced(parallel: bool):
    kernels = _sized().values()
    saved = [k.threshold for k in kernels]
    for k in kernels:
        k.threshold = 0 if parallel else 1 << 62
    try:
        yield
    finally:
        for k, t in zip(kernels, saved, strict=True):
            k.threshold = t


def _flat(result) -> list[np.ndarray]:
    if isinstance(result, dict):
        return [np.asarray(result[k]) for k in sorted(result)]
    if isinstance(result, tuple | list):
        return [a for r in result for a in _flat(r)]
    return [np.asarray(result)]


def _same_both_ways(fn):
    with _forced(False):
        serial = _flat(fn())
    with _forced(True):
        parallel = _flat(fn())
    assert len(serial) == len(parallel)
    for s, p in zip(serial, parallel, strict=True):
        assert s.dtype == p.dtype and np.array_equal(s, p, equal_nan=s.dtype.kind in "fc")


def _quats(n: int, seed: int) -> np.ndarray:
    q = random_quats(n, seed=seed)
    q[::17] = np.nan  # unindexed rows take the kernels' NaN branch
    return q


CASES = {
    "euler": lambda: (quat_from_euler(np.random.default_rng(0).uniform(0, 90, (300, 3))),
                      euler_from_quat(random_quats(300, seed=1))),
    "matrix": lambda: quat_from_matrix(matrix_from_quat(random_quats(300, seed=2))),
    "multiply_rotate": lambda: (quat_multiply(random_quats(300, seed=3), random_quats(300, seed=4)),
                                quat_rotate(random_quats(300, seed=5), np.random.default_rng(6).normal(size=(300, 3)))),
    "disorientation": lambda: (disorientation_angle(random_quats(300, seed=7), random_quats(300, seed=8)),
                               disorientation(random_quats(300, seed=9), random_quats(300, seed=10))),
    "cubic": lambda: (reduce_cubic(random_quats(300, seed=11)),
                      nearest_equivalent(random_quats(300, seed=12), random_quats(300, seed=13))),
    "schmid": lambda: (schmid_factors(_quats(300, 14), (0.3, 0.9, 0.1), slip_systems("bcc")),
                       schmid_summary(_quats(300, 15), (0.0, 1.0, 0.0), slip_systems("bcc"))),
    "shear_traces": lambda: (resolved_shear(_quats(300, 16), np.diag([100.0, -50.0, 20.0]), slip_systems("fcc")),
                             trace_geometry(_quats(300, 17), slip_systems("bcc"))),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_serial_and_parallel_copies_agree(case):
    _same_both_ways(CASES[case])


def test_csl_deviation_copies_agree():
    from slipnet.crystal.csl import classify_boundaries

    qa, qb = random_quats(400, seed=20), random_quats(400, seed=21)
    dq = quat_multiply(qb, qa * np.array([1.0, -1.0, -1.0, -1.0]))
    angle = np.rad2deg(disorientation_angle(qa, qb))
    _same_both_ways(lambda: classify_boundaries(angle, dq, np.ones(400, bool), 2.0)[1])


def test_specimen_and_stress_copies_agree():
    from slipnet.stress import solve_elastic
    from slipnet.synthetic import make_specimen

    def run():
        spec = make_specimen((24, 30), 2.0, grain_size_um=10.0, seed=3)
        field = solve_elastic(spec.omap, (0.0, 1.0, 0.0), 100.0)
        return spec.omap.quats, spec.truth_labels, field.stress, field.strain

    _same_both_ways(run)


def test_plastic_kernels_copies_agree():
    from slipnet.stress import _kernels as k

    rng = np.random.default_rng(30)
    n, ns = 500, 12
    q = kernel_input(random_quats(n, seed=31))
    soft = np.zeros(n, bool)
    soft[::9] = True
    sig = rng.normal(0.0, 100.0, (6, n))
    schmid_c = rng.normal(0.0, 0.3, (ns, 6))
    crss = rng.uniform(80.0, 120.0, (n, ns))
    reverse = rng.uniform(0.9, 1.1, ns)
    c = rng.normal(size=(n, 6, 6))
    eps, eig = rng.normal(size=(6, n)), rng.normal(size=(6, n))

    def run():
        rate, eps_rate, out = np.empty((n, ns)), np.empty((6, n)), np.empty((6, n))
        k.slip_rates(q, soft, sig, schmid_c, crss, reverse, 1e-3, 20.0, rate, eps_rate)
        k.apply_stiffness_eigen(c, eps, eig, out)
        return rate, eps_rate, out

    _same_both_ways(run)


def test_every_sized_kernel_was_run_both_ways():
    # runs after the tests above in this file (pytest keeps file order): both copies compiled for each kernel
    missing = [name for name, k in _sized().items() if not (k.serial.signatures and k.parallel.signatures)]
    assert not missing, f"sized kernels without a serial/parallel comparison above: {missing}"
