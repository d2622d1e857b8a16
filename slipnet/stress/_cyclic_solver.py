"""Load stepping and the global Newton loop of the cyclic crystal-plasticity solver (private).

Per increment: an implicit (backward Euler) update at every point gives stress and consistent
tangent (:func:`slipnet.stress._cyclic_kernels.return_map`); the strain correction comes from one
linearised spectral solve ``G(C_t : δε) = r`` by conjugate gradients with the tangent field
(Newton–Krylov on the Galerkin form, Zeman et al. 2010, J. Comput. Phys. 229:8065; de Geus et
al. 2017, Comput. Methods Appl. Mech. Eng. 318:412), solved inexactly (the CG tolerance follows
the Newton residual). Stress control keeps the zero frequency as identity (the mean stress is the
applied one); strain control removes the load-axis direction ``L = l ⊗ l`` from the zero
frequency, so the mean strain along L is imposed while the other five mean stress components
stay zero (mixed control). An increment whose local or global Newton fails is cut back.
"""

from __future__ import annotations

import contextlib
import math
from dataclasses import dataclass, field

import numpy as np

from slipnet.errors import NumericalError
from slipnet.stress import _cyclic_kernels as _ck
from slipnet.stress.elastic import _Spectral


class _Operator(_Spectral):
    """The spectral operator with the load-axis mean removed under strain control."""

    def __init__(self, stiffness, shape, spacing, scheme, workers, axial6=None) -> None:
        super().__init__(stiffness, shape, spacing, scheme, workers)
        self.axial = axial6

    def project(self, fld: np.ndarray) -> np.ndarray:
        out = super().project(fld)
        if self.axial is not None:
            m = float(self.axial @ fld.mean(axis=1))
            out -= self.axial[:, None] * m
        return out


@dataclass
class Problem:
    """Everything the integrator needs, as plain arrays (internal)."""

    shape: tuple[int, int]
    spacing: tuple[float, float]
    scheme: str
    workers: int
    c_el: np.ndarray  # (N, 6, 6) sample-frame elastic stiffness, MPa
    qrot: np.ndarray  # (N, 6, 6)
    pidx: np.ndarray  # (N,) int64
    cc: np.ndarray  # (nph, 6, 6) crystal-frame stiffness, MPa
    cp: np.ndarray  # (nph, ns, 6)
    amat: np.ndarray  # (nph, ns, ns)
    schmid: np.ndarray  # (ns, 6)
    plane_nn: np.ndarray  # (ns, 6)
    hmat: np.ndarray  # (ns, ns)
    rev: np.ndarray  # (ns,)
    tau0: np.ndarray  # (N, ns)
    axis6: np.ndarray  # (6,)
    xy: np.ndarray  # (N, 2) µm
    labels: np.ndarray  # (N,) grain ids, -1 none


@dataclass
class Numerics:
    tol: float
    max_iter: int
    max_newton: int
    max_local: int
    slip_target: float
    min_increments: int
    rate_floor: float  # fraction of the reference rate below which a system is inactive
    max_cutbacks: int
    nblocks: int
    point_threads: int = 1  # numba threads of the per-point update (it is worth threading on small maps too)


@dataclass
class Segment:
    cycle: int
    name: str
    start: float
    end: float


@dataclass
class Outcome:
    eps: np.ndarray
    sig: np.ndarray
    ep: np.ndarray
    gam: np.ndarray
    v: np.ndarray
    x: np.ndarray
    gmin: np.ndarray
    gmax: np.ndarray
    snmax: np.ndarray
    rows: list = field(default_factory=list)
    cycle_ends: list = field(default_factory=list)
    totals: dict = field(default_factory=dict)


@contextlib.contextmanager
def _threads(n: int):
    import numba

    old = numba.get_num_threads()
    if n != old:
        numba.set_num_threads(max(1, min(int(n), numba.config.NUMBA_NUM_THREADS)))
    try:
        yield
    finally:
        if n != old:
            numba.set_num_threads(old)


def _params(mat: dict, k: float, numer: Numerics) -> np.ndarray:
    p = np.zeros(_ck.N_PARAMS)
    p[_ck.K_RATE] = k
    p[_ck.N_EXP] = mat["rate_exponent"]
    p[_ck.C_AF] = mat["backstress_modulus_mpa"]
    p[_ck.D_AF] = mat["backstress_recovery"]
    p[_ck.Q_VOCE] = mat["voce_mpa"]
    p[_ck.B_VOCE] = mat["voce_rate"]
    p[_ck.THETA] = mat["linear_hardening_mpa"]
    p[_ck.Z_FLOOR] = numer.rate_floor ** (1.0 / mat["rate_exponent"])
    p[_ck.ATOL] = 1e-3 * numer.rate_floor * k
    p[_ck.RTOL] = min(1e-6, 0.05 * numer.tol)
    p[_ck.MAX_STEP] = 0.05
    return p


def integrate(prob: Problem, segments: list[Segment], rate: float, control: str, scale: float, mat: dict,
              numer: Numerics, last_cycle: int, progress=None) -> Outcome:
    """Run the load schedule; raise :class:`NumericalError` (nothing returned) on failure.

    ``rate`` is the load rate (MPa/s under stress control, 1/s under strain control) and
    ``scale`` the residual normalisation (MPa).
    """
    n = prob.c_el.shape[0]
    ns = prob.schmid.shape[0]
    tan = prob.c_el.copy()
    op = _Operator(tan, prob.shape, prob.spacing, prob.scheme, prob.workers,
                   prob.axis6 if control == "strain" else None)
    L = prob.axis6
    eps = np.zeros((6, n))
    ep = np.zeros((6, n))
    sig = np.zeros((6, n))
    gam = np.zeros((n, ns))
    v = np.zeros((n, ns))
    x = np.zeros((n, ns))
    g = np.ascontiguousarray(prob.tau0.copy())
    dg = np.zeros((n, ns))
    dg_last = np.zeros((n, ns))  # slip increments of the last accepted increment
    gmin = np.zeros((n, ns))
    gmax = np.zeros((n, ns))
    snmax = np.full((n, ns), -np.inf)
    info = np.zeros(n, np.int32)
    blkmax = np.zeros(numer.nblocks)
    tmp = np.empty(n)
    out = Outcome(eps, sig, ep, gam, v, x, gmin, gmax, snmax)
    d_prev = None  # strain change of the last accepted increment
    ds_prev = 0.0
    t = 0.0
    inc = 0
    totals = {"newton": 0, "cg": 0, "cutbacks": 0, "rejected": 0, "local_max": 0}
    tracking = False

    def mean_axial(f: np.ndarray) -> float:
        _ck.axial_component(f, L, tmp)
        return float(tmp.mean())

    def where(p: int) -> str:
        return f"point ({prob.xy[p, 0]:.1f}, {prob.xy[p, 1]:.1f}) µm"

    def attempt(target: float, ds_signed: float, dt: float):
        """Global Newton for one increment; returns (eps_new, sig_new, newton its, cg its) or a failure text."""
        prm = _params(mat, mat["reference_rate"] * dt, numer)
        e = eps.copy()
        same = d_prev is not None and ds_prev != 0.0 and ds_signed * ds_prev > 0.0
        if same:
            # continue the last increment: its strain change and (as the local Newton's start) its slips
            e += (ds_signed / ds_prev) * d_prev
            np.multiply(dg_last, ds_signed / ds_prev, out=dg)
        else:
            dg.fill(0.0)
        if control == "strain":
            e += L[:, None] * (target - mean_axial(e))
            b = np.zeros((6, n))
        else:
            b = np.repeat((target * L)[:, None], n, axis=1)
        s_new = np.empty((6, n))
        res_prev = math.inf
        cg_total = 0
        for it in range(numer.max_newton):
            with _threads(numer.point_threads):
                _ck.return_map(e, ep, prob.qrot, prob.c_el, prob.pidx, prob.cc, prob.cp, prob.amat, prob.hmat,
                               prob.rev, x, g, v, dg, prm, numer.max_local, s_new, tan, info, numer.nblocks)
            bad = np.flatnonzero(info < 0)
            if bad.size:
                return f"the local Newton update did not converge at {where(int(bad[0]))} ({bad.size} points)"
            totals["local_max"] = max(totals["local_max"], int(info.max()))
            r = b - op.project(s_new)
            res = math.sqrt(float(np.einsum("ij,ij->", r, r)) / n) / scale
            if not math.isfinite(res):
                return "the equilibrium residual is not finite"
            if res <= numer.tol:
                return e, s_new, it, cg_total
            if it >= 2 and res > 0.9 * res_prev:
                rr = np.einsum("ij,ij->j", r, r)
                return (f"the global Newton iteration stalled (residual {res:.2e} after {it + 1} iterations, "
                        f"largest at {where(int(np.argmax(rr)))})")
            res_prev = res
            de = np.zeros((6, n))
            try:
                its, _ = op.solve(r, de, scale, max(0.3 * numer.tol, 0.02 * res), numer.max_iter)
            except NumericalError as err:
                return f"the linearised solve failed ({err})"
            cg_total += its
            e += de
        rr = np.einsum("ij,ij->j", r, r)
        return (f"the global Newton iteration did not converge in max_newton={numer.max_newton} iterations "
                f"(residual {res:.2e}, largest at {where(int(np.argmax(rr)))})")

    for si, seg in enumerate(segments):
        if seg.cycle == last_cycle and not tracking and seg.name != "ramp":
            tracking = True
            gmin[:] = gam
            gmax[:] = gam
            snmax.fill(-np.inf)
            dg.fill(0.0)
            _ck.commit(dg, sig, prob.qrot, prob.pidx, prob.schmid, prob.plane_nn, prob.tau0, prob.hmat,
                       _params(mat, 1.0, numer), ep, gam, v, x, g, gmin, gmax, snmax, True, numer.nblocks, blkmax)
        length = abs(seg.end - seg.start)
        direction = 1.0 if seg.end >= seg.start else -1.0
        hmax = length / numer.min_increments
        h = hmax if si == 0 else min(hmax, max(out.totals.get("h", hmax), hmax / 16))
        s = seg.start
        cut = 0
        while abs(seg.end - s) > 1e-12 * max(length, 1e-300):
            remaining = abs(seg.end - s)
            ds = min(h, hmax, remaining)
            if remaining - ds < 0.25 * ds:
                ds = remaining
            target = seg.end if ds == remaining else s + direction * ds
            dt = ds / rate
            res = attempt(target, direction * ds, dt)
            if isinstance(res, str):
                cut += 1
                totals["cutbacks"] += 1
                if cut > numer.max_cutbacks:
                    raise NumericalError(
                        f"crystal plasticity failed in cycle {seg.cycle} ({seg.name}), increment {inc + 1}, at "
                        f"t = {t:.4g} s going to load {target:.5g} ({'MPa' if control == 'stress' else 'strain'}): "
                        f"{res}; cut back {numer.max_cutbacks} times. Lower the load, raise max_cutbacks or "
                        "max_newton, or relax tol")
                h = 0.25 * ds
                continue
            e_new, s_new, nits, cgits = res
            dgmax = float(np.abs(dg).max()) if ns else 0.0
            if dgmax > 2.5 * numer.slip_target and ds > hmax / 4096.0:
                # too coarse for the slip it carries (typically the first plastic step after an elastic
                # stretch): redo it smaller
                totals["rejected"] += 1
                h = ds * max(0.05, 0.8 * numer.slip_target / dgmax)
                continue
            d_prev = e_new - eps
            ds_prev = direction * ds
            eps[:] = e_new
            sig[:] = s_new
            _ck.commit(dg, sig, prob.qrot, prob.pidx, prob.schmid, prob.plane_nn, prob.tau0, prob.hmat,
                       _params(mat, 1.0, numer), ep, gam, v, x, g, gmin, gmax, snmax, tracking, numer.nblocks,
                       blkmax)
            dg_last[:] = dg
            t += dt
            s = target
            inc += 1
            totals["newton"] += nits + 1
            totals["cg"] += cgits
            row = {"increment": inc, "cycle": seg.cycle, "segment": seg.name, "time_s": t,
                   "stress_mpa": mean_axial(sig), "strain": mean_axial(eps),
                   "plastic_strain": mean_axial(ep), "max_slip_increment": dgmax,
                   "newton_iterations": nits + 1, "cg_iterations": cgits}
            out.rows.append(row)
            if progress is not None:
                progress(row)
            ratio = dgmax / numer.slip_target
            if ratio > 0:
                grow = min(2.0, 0.9 / ratio)
            else:
                grow = 2.0
            if nits > 5:
                grow = min(grow, 1.0)
            h = max(ds * grow, hmax / 64.0)
            out.totals["h"] = h
        out.cycle_ends.append({"cycle": seg.cycle, "segment": seg.name, "ep_axial": _axial_copy(ep, L, n),
                               "acc": v.sum(axis=1)})
    out.totals.update(totals)
    out.totals["increments"] = inc
    out.totals["time_s"] = t
    return out


def _axial_copy(f: np.ndarray, L: np.ndarray, n: int) -> np.ndarray:
    o = np.empty(n)
    _ck.axial_component(f, L, o)
    return o
