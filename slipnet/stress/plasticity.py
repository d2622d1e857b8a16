"""The earlier explicit crystal-plasticity integrator, kept only as a reference.

Not part of the public API: :func:`slipnet.stress.solve_monotonic` (the monotonic special case of
the implicit solver :func:`slipnet.stress.solve_cyclic`) replaces it everywhere, the ``stress
--plastic`` command included. It stays because the implicit solver is checked against it (the
monotonic limit agrees within 2 % on cases it can run, ``tests/test_cyclic.py``) and because
``benchmarks/bench_cyclic.py`` measures the implicit solver's speed against it. It needs hundreds
of sub-steps where the implicit update takes a few increments; do not use it for new work.

Constitutive equations (small strain)
-------------------------------------
* Stress: ``σ = C : (ε − ε_p)`` with the per-point cubic stiffness of :mod:`slipnet.stress`.
* Plastic strain rate: ``ε̇_p = Σ_α γ̇_α P_α``, ``P_α = sym(d_α ⊗ n_α)`` (Schmid tensor of system α,
  rotated into the sample frame with the point's orientation).
* Slip rate, power law (Hutchinson 1976, Proc. R. Soc. Lond. A 348:101; Peirce, Asaro & Needleman
  1982, Acta Metall. 30:1087; Asaro & Needleman 1985, Acta Metall. 33:923):
  ``γ̇_α = γ̇₀ |τ_α / τc_α|ⁿ sign(τ_α)`` with ``τ_α = σ : P_α``.
* Hardening of the critical resolved shear stress: ``τ̇c_α = h₀ (1 − τc_α/τ_s) Σ_β q_αβ |γ̇_β|``
  with ``q_αβ = q + (1 − q) δ_αβ`` (latent ratio q); ``τ_s = ∞`` gives linear hardening, a finite
  ``τ_s`` the saturating (Voce-type) form of Kalidindi, Bronkhorst & Anand (1992), J. Mech. Phys.
  Solids 40:537. Initial ``τc_α = τ₀ ·`` (relative CRSS of α from the slip catalogue), times the
  catalogue's reverse-sense ratio for negative τ (the {112}<111> twinning/anti-twinning asymmetry).

Integration
-----------
The macroscopic uniaxial stress ramps linearly from 0 to σ over ``load_time_s``, reported in
``increments`` equal increments. Because the problem is linear for a given plastic strain, the
stress is ``s(t)·σ₁ + σ_r(ε_p)``: σ₁ the elastic solution for a unit load (one spectral solve) and
σ_r the residual stress of the plastic strain at zero macroscopic stress (a spectral solve with
the eigenstrain, warm-started, at every sub-step). Sub-steps are explicit (forward Euler in the
state, load taken at the sub-step midpoint) with the size chosen so that no slip increment exceeds
``max_slip_increment`` — small enough for the stress relaxation of one sub-step to stay well below
``τc / n``. This is the elasto-viscoplastic spectral idea of Lebensohn, Kanjarla & Eisenlohr (2012),
Int. J. Plast. 32–33:59, in its simplest explicit form.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from slipnet._checks import check_positive, check_range
from slipnet.errors import NumericalError, ParameterError
from slipnet.maps.orientation_map import OrientationMap
from slipnet.stress import _kernels as _k
from slipnet.stress._threads import _numba_threads, _workers
from slipnet.stress.constants import from_mandel, to_mandel
from slipnet.stress.elastic import StressField, _check_common, _prepare, _Spectral, assumptions_text
from slipnet.stress.local import default_systems

__all__ = ["PlasticField", "explicit_plastic_reference"]


@dataclass(frozen=True, eq=False)
class PlasticField:
    """Result of :func:`explicit_plastic_reference`.

    Attributes
    ----------
    field : StressField
        Stress and total strain at the end of loading (its ``assumptions`` mention plasticity).
    slip : (ny, nx, n_systems) ndarray
        Signed accumulated slip γ per system and point.
    accumulated_slip : (ny, nx) ndarray
        Total accumulated slip ``Σ_α ∫|γ̇_α| dt`` per point (a localisation measure).
    crss : (ny, nx, n_systems) ndarray
        Critical resolved shear stress at the end, MPa.
    plastic_strain : (ny, nx, 3, 3) ndarray
        Plastic strain, sample frame.
    history : pandas.DataFrame
        One row per increment: ``increment``, ``time_s``, ``applied_stress_mpa``,
        ``axial_strain`` (mean strain along the load axis), ``mean_accumulated_slip``,
        ``max_accumulated_slip``, ``substeps``, ``iterations``.
    systems
        The slip systems used.
    settings : dict
        The inputs.
    """

    field: StressField
    slip: np.ndarray
    accumulated_slip: np.ndarray
    crss: np.ndarray
    plastic_strain: np.ndarray
    history: pd.DataFrame
    systems: object
    settings: dict = field(default_factory=dict)

    @property
    def assumptions(self) -> str:
        """The modelling assumptions (print with every output)."""
        return self.field.assumptions

    def most_active_system(self) -> np.ndarray:
        """Index of the system with the largest |γ| per point, ``(ny, nx)`` int; −1 where nothing slipped."""
        a = np.abs(self.slip)
        idx = np.argmax(a, axis=-1)
        return np.where(a.max(axis=-1) > 0, idx, -1)


def explicit_plastic_reference(
    omap: OrientationMap,
    load_axis,
    stress: float = 250.0,
    *,
    increments: int = 10,
    load_time_s: float = 10.0,
    crss_mpa: float = 100.0,
    rate_exponent: float = 20.0,
    reference_rate: float = 1e-3,
    hardening_mpa: float = 200.0,
    saturation_mpa: float | None = None,
    latent_ratio: float = 1.0,
    systems=None,
    max_slip_increment: float = 2e-5,
    max_substeps: int = 20000,
    tol: float = 1e-6,
    max_iter: int = 1000,
    constants=None,
    compliant_ratio: float = 1e-3,
    unindexed: str = "compliant",
    scheme: str = "rotated",
    workers: int | None = None,
) -> PlasticField:
    """Reference only: the explicit (forward Euler, sub-stepped) monotonic crystal-plasticity solve.

    Use :func:`slipnet.stress.solve_monotonic` instead; this is kept to check it against. Loads a
    periodic columnar polycrystal in uniaxial stress with rate-dependent crystal plasticity.

    Parameters
    ----------
    omap, load_axis, tol, max_iter, constants, compliant_ratio, unindexed, scheme, workers
        As in :func:`slipnet.stress.solve_elastic`.
    stress
        Final macroscopic uniaxial stress, MPa (ramped linearly from 0).
    increments
        Number of equal load increments reported in ``history`` (≥ 1).
    load_time_s
        Duration of the ramp, s.
    crss_mpa
        Initial critical resolved shear stress τ₀, MPa, times each system's relative CRSS.
    rate_exponent
        Power-law exponent n (≥ 1).
    reference_rate
        Reference slip rate γ̇₀, 1/s.
    hardening_mpa
        Hardening modulus h₀, MPa (0: no hardening).
    saturation_mpa
        Saturation CRSS τ_s, MPa (None: linear hardening).
    latent_ratio
        Latent hardening ratio q (1: isotropic hardening).
    systems
        Slip systems (default: the slip catalogue's default for the main phase).
    max_slip_increment
        Largest slip increment per sub-step.
    max_substeps
        Most sub-steps before :class:`NumericalError`.

    Returns
    -------
    PlasticField
    """
    axis, sig, tol, max_iter, ratio, scheme, unindexed = _check_common(
        load_axis, stress, tol, max_iter, compliant_ratio, scheme, unindexed)
    if isinstance(increments, bool) or not isinstance(increments, int | np.integer) or increments < 1:
        raise ParameterError(f"increments should be a positive integer; got {increments!r}")
    t_total = check_positive(load_time_s, "load_time_s")
    tau0 = check_positive(crss_mpa, "crss_mpa")
    n_exp = check_range(rate_exponent, "rate_exponent", 1.0, 200.0)
    rate0 = check_positive(reference_rate, "reference_rate")
    h0 = check_positive(hardening_mpa, "hardening_mpa", allow_zero=True)
    tau_s = math.inf if saturation_mpa is None else check_positive(saturation_mpa, "saturation_mpa")
    if tau_s <= tau0:
        raise ParameterError(f"saturation_mpa should exceed crss_mpa={tau0:g}; got {saturation_mpa!r}")
    q_lat = check_positive(latent_ratio, "latent_ratio", allow_zero=True)
    dgam = check_range(max_slip_increment, "max_slip_increment", 1e-9, 1e-2)
    if isinstance(max_substeps, bool) or not isinstance(max_substeps, int | np.integer) or max_substeps < 1:
        raise ParameterError(f"max_substeps should be a positive integer; got {max_substeps!r}")

    nthreads = _workers(workers, omap.shape[0] * omap.shape[1])
    with _numba_threads(nthreads):
        return _run(omap, axis, sig, tol, max_iter, ratio, scheme, unindexed, constants, systems, increments,
                    t_total, tau0, n_exp, rate0, h0, tau_s, q_lat, dgam, max_substeps, saturation_mpa, nthreads)


def _run(omap, axis, sig, tol, max_iter, ratio, scheme, unindexed, constants, systems, increments,
         t_total, tau0, n_exp, rate0, h0, tau_s, q_lat, dgam, max_substeps, saturation_mpa, nthreads):
    c, q, _ph, soft, _consts = _prepare(omap, constants, ratio, unindexed)
    systems = default_systems(omap, systems)
    nrm = np.asarray(systems.normals, dtype=np.float64)
    drc = np.asarray(systems.directions, dtype=np.float64)
    schmid_c = np.ascontiguousarray(to_mandel(0.5 * (drc[:, :, None] * nrm[:, None, :]
                                                     + nrm[:, :, None] * drc[:, None, :])))
    ns = nrm.shape[0]
    ny, nx = omap.shape
    op = _Spectral(c, (ny, nx), (omap.row_spacing, omap.step), scheme, nthreads)
    n = op.n
    scale = abs(sig)

    # unit-load elastic solution σ₁, ε₁
    unit = to_mandel(np.outer(axis, axis))
    e1 = np.repeat(np.linalg.solve(c.mean(axis=0), unit)[:, None], n, axis=1)
    its_total, _ = op.solve(np.repeat(unit[:, None], n, axis=1), e1, 1.0, tol, max_iter)
    s1 = op.stress(e1)

    soft_flat = np.ascontiguousarray(soft.reshape(n))
    crss = np.repeat((tau0 * np.asarray(systems.crss, dtype=float))[None, :], n, axis=0)
    gamma = np.zeros((n, ns))
    acc = np.zeros(n)
    eps_p = np.zeros((6, n))
    e_r = np.zeros((6, n))  # residual-strain solution for the current ε_p at zero load
    s_r = np.zeros((6, n))
    rates = np.empty((n, ns))
    eps_rate = np.empty((6, n))
    latent = q_lat + (1.0 - q_lat) * np.eye(ns)
    base = np.asarray(systems.crss, dtype=float)
    reverse = np.asarray(getattr(systems, "crss_reverse", base), dtype=float) / base

    def eval_rates(load: float) -> float:
        sig_now = load * s1 + s_r
        _k.slip_rates(q, soft_flat, sig_now, schmid_c, crss, reverse, rate0, n_exp, rates, eps_rate)
        m = float(np.abs(rates).max())
        if not math.isfinite(m):
            raise NumericalError("slip rates overflowed; lower the applied stress or raise crss_mpa")
        return m

    rows = []
    t = 0.0
    substeps = 0
    for inc in range(1, increments + 1):
        t_end = t_total * inc / increments
        sub_inc = 0
        its_inc = 0
        while t < t_end * (1 - 1e-12):
            dt = t_end - t
            m = eval_rates(sig * (t + 0.5 * dt) / t_total)
            if m * dt > dgam:
                dt = dgam / m
                m = eval_rates(sig * (t + 0.5 * dt) / t_total)
            if m == 0.0:
                t = t_end
                continue
            dg = rates * dt
            eps_p += eps_rate * dt
            gamma += dg
            adg = np.abs(dg)
            acc += adg.sum(axis=1)
            if h0 > 0.0:
                crss += h0 * (1.0 - crss / tau_s) * (adg @ latent.T)
            t += dt
            substeps += 1
            sub_inc += 1
            if substeps > max_substeps:
                raise NumericalError(
                    f"crystal plasticity needed more than max_substeps={max_substeps} sub-steps by t={t:.3g} s "
                    f"(increment {inc}); raise max_substeps or max_slip_increment, or lower the load"
                )
            # residual stress of the new plastic strain at zero macroscopic stress: G(C:ε) = G(C:ε_p)
            b = op.project(op.stress(eps_p))
            its, _ = op.solve(b, e_r, scale, tol, max_iter)
            its_inc += its
            _k.apply_stiffness_eigen(c, e_r, eps_p, s_r)
        its_total += its_inc
        eps_tot = sig * inc / increments * e1 + e_r
        rows.append({
            "increment": inc, "time_s": t_end, "applied_stress_mpa": sig * inc / increments,
            "axial_strain": float(axis @ from_mandel(eps_tot.mean(axis=1)) @ axis),
            "mean_accumulated_slip": float(acc.mean()), "max_accumulated_slip": float(acc.max()),
            "substeps": sub_inc, "iterations": its_inc,
        })

    eps_final = sig * e1 + e_r
    sig_final = sig * s1 + s_r
    # the stated residual is that of the final state, recomputed
    b = np.repeat(to_mandel(sig * np.outer(axis, axis))[:, None], n, axis=1) + op.project(op.stress(eps_p))
    r = b - op.apply(eps_final)
    res = math.sqrt(_k.dot(r, r) / n) / scale
    if not res <= max(10 * tol, 1e-12):
        raise NumericalError(f"the final plastic state is not in equilibrium (residual {res:.3g} > 10·tol)")
    fld = StressField(
        stress=from_mandel(sig_final.T.reshape(ny, nx, 6)),
        strain=from_mandel(eps_final.T.reshape(ny, nx, 6)),
        iterations=its_total,
        residual=res,
        applied_stress=sig,
        load_axis=axis,
        macro_strain=from_mandel(eps_final.mean(axis=1)),
        assumptions=assumptions_text(scheme, ratio, omap.grid, plastic=True, unindexed=unindexed),
        omap=omap,
        compliant=soft,
        tol=tol,
        scheme=scheme,
    )
    settings = {"stress_mpa": sig, "increments": increments, "load_time_s": t_total, "crss_mpa": tau0,
                "rate_exponent": n_exp, "reference_rate": rate0, "hardening_mpa": h0,
                "saturation_mpa": saturation_mpa, "latent_ratio": q_lat, "max_slip_increment": dgam,
                "substeps": substeps}
    return PlasticField(
        field=fld,
        slip=gamma.reshape(ny, nx, ns),
        accumulated_slip=acc.reshape(ny, nx),
        crss=crss.reshape(ny, nx, ns),
        plastic_strain=from_mandel(eps_p.T.reshape(ny, nx, 6)),
        history=pd.DataFrame(rows),
        systems=systems,
        settings=settings,
    )
