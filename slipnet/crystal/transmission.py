"""Slip transmission across grain boundaries: m′, residual Burgers vector, Shen factor, edge summaries.

Definitions (all vectors in the sample frame; ``A`` the incoming grain, ``B`` the outgoing one)
------------------------------------------------------------------------------------------
* **m′** (Luster & Morris 1995, Metall. Mater. Trans. A 26:1745): ``m′ = cos ψ · cos κ`` with ψ
  the angle between the slip-plane normals and κ between the slip directions; reported as |m′|
  (1 = perfectly aligned systems).
* **Residual Burgers vector** (Lee, Robertson & Birnbaum 1989, Scripta Metall. 23; 1990,
  Metall. Trans. A 21:2437): ``|b_in − b_out|`` with the sign of ``b_out`` that minimises it;
  Burgers vectors a/2⟨111⟩ (BCC) or a/2⟨110⟩ (FCC). In lattice parameters, or nm when a lattice
  parameter is known.
* **Shen factor** (Shen, Wagoner & Clark 1986, Scripta Metall. 20:921): ``N = |L_A·L_B| ·
  |d_A·d_B|`` with ``L`` the lines where the slip planes meet the boundary plane. A surface map
  does not show the boundary plane: it is **assumed** to contain the surface trace of the
  boundary and to make ``boundary_inclination_deg`` with the surface (90°, perpendicular, by default).
  Its normal is ``sin φ · (z × t) + cos φ · z`` for trace direction ``t`` and inclination φ.
  A slip plane parallel to the boundary plane has no line in it and gets N = 0.

Transmission score (A → B)
--------------------------
``score = max_j |m′(i*, j)| · e_B(j) / e_max`` where ``i*`` is the most-stressed system of A
(largest effective Schmid factor, the one leading the pile-up against the boundary), ``e_B(j)``
the effective Schmid factor ``|m| / crss`` of outgoing system j in B and ``e_max = 0.5 / min(crss)``
the largest value an effective factor can take. So the score lies in [0, 1]: it is high only
when an outgoing system is both geometrically aligned with the incoming slip (m′) *and* well
stressed in B, the two conditions observed for slip transfer (Luster & Morris 1995; Bieler et al.
2014, Int. J. Plast. 59:1 review both). Unlike a normalisation by B's own best factor, it stays
low when B is badly oriented for every system. It is directional because ``i*`` is taken in
the incoming grain.
"""

from __future__ import annotations

import numpy as np

from slipnet._checks import check_range
from slipnet.crystal import _slip_kernels as _k
from slipnet.crystal.orientation import matrix_from_quat
from slipnet.crystal.slip_systems import SlipSystems, check_systems, effective_schmid, schmid_factors
from slipnet.errors import ParameterError
from slipnet.sized_kernels import kernel_input

__all__ = [
    "boundary_plane_normals",
    "m_prime",
    "residual_burgers",
    "shen_factor",
    "transmission_summaries",
]



def _one_quat(q, name: str) -> np.ndarray:
    a = np.asarray(q, dtype=float).reshape(-1)
    if a.size != 4 or not np.all(np.isfinite(a)) or abs(np.linalg.norm(a) - 1.0) > 1e-6:
        raise ParameterError(f"{name} should be one unit quaternion (w, x, y, z); got {q!r}")
    return a


def _sample_vectors(q, systems: SlipSystems) -> tuple[np.ndarray, np.ndarray]:
    g = matrix_from_quat(q)
    # v_s = gᵀ v_c for row vectors: v_c @ g
    return systems.normals @ g, systems.directions @ g


def m_prime(q_a, q_b, systems: SlipSystems) -> np.ndarray:
    """|m′| between every system of grain A (rows) and of grain B (columns).

    Parameters
    ----------
    q_a, q_b : (4,) array_like
        Orientations of the two grains (sample → crystal).
    systems
        From :func:`slipnet.slip.slip_systems`.

    Returns
    -------
    (n_sys, n_sys) ndarray
        ``|(n_A·n_B)(d_A·d_B)|`` in [0, 1] (Luster & Morris 1995). ``m_prime(q_b, q_a)`` is the
        transpose.
    """
    systems = check_systems(systems)
    na, da = _sample_vectors(_one_quat(q_a, "q_a"), systems)
    nb, db = _sample_vectors(_one_quat(q_b, "q_b"), systems)
    return np.abs((na @ nb.T) * (da @ db.T))


def residual_burgers(q_a, q_b, systems: SlipSystems, *, lattice_parameter_nm: float | None = None) -> np.ndarray:
    """|b_in − b_out| for every incoming system of A (rows) and outgoing system of B (columns).

    The sign of ``b_out`` is the one giving the smaller residual (a dislocation of either sign
    may be emitted). Units: lattice parameters, or nm if ``lattice_parameter_nm`` is given.

    Returns
    -------
    (n_sys, n_sys) ndarray
        In [0, √2·|b|]; 0 for parallel Burgers vectors.
    """
    systems = check_systems(systems)
    scale = systems.burgers_length
    if lattice_parameter_nm is not None:
        scale *= check_range(lattice_parameter_nm, "lattice_parameter_nm", 1e-3, 10.0)
    _, da = _sample_vectors(_one_quat(q_a, "q_a"), systems)
    _, db = _sample_vectors(_one_quat(q_b, "q_b"), systems)
    diff_minus = np.linalg.norm(da[:, None, :] - db[None, :, :], axis=-1)
    diff_plus = np.linalg.norm(da[:, None, :] + db[None, :, :], axis=-1)
    return scale * np.minimum(diff_minus, diff_plus)


def boundary_plane_normals(trace_angle_deg, boundary_inclination_deg=90.0) -> np.ndarray:
    """Unit normals (sample frame) of boundary planes assumed from their surface traces.

    Parameters
    ----------
    trace_angle_deg : (...) array_like
        Trace direction ``t = (cos θ, sin θ, 0)``, degrees from +x towards +y.
    boundary_inclination_deg : (...) array_like
        Angle φ between the boundary plane and the surface, in (0, 180) (90 = perpendicular; above
        90 the plane leans the other way). The plane contains ``t``; its normal is
        ``sin φ (z × t) + cos φ z``. The forecast uses the same convention.

    Returns
    -------
    (..., 3) ndarray
    """
    th = np.deg2rad(np.asarray(trace_angle_deg, dtype=float))
    phi_deg = np.asarray(boundary_inclination_deg, dtype=float)
    if np.any(~np.isfinite(phi_deg)) or np.any((phi_deg <= 0) | (phi_deg >= 180)):
        raise ParameterError("boundary_inclination_deg should lie in (0, 180) degrees (90 = perpendicular to the "
                             f"surface); got {boundary_inclination_deg!r}")
    phi = np.deg2rad(phi_deg)
    th, phi = np.broadcast_arrays(th, phi)
    return np.stack([-np.sin(th) * np.sin(phi), np.cos(th) * np.sin(phi), np.cos(phi)], axis=-1)


def shen_factor(q_a, q_b, systems: SlipSystems, trace_angle_deg: float, *,
                boundary_inclination_deg: float = 90.0) -> np.ndarray:
    """Shen, Wagoner & Clark (1986) factor ``|L_A·L_B|·|d_A·d_B|`` for every pair of systems.

    The boundary plane is assumed from its surface trace (``trace_angle_deg``) and inclination
    (see :func:`boundary_plane_normals`). Returns (n_sys, n_sys), rows = systems of A.
    """
    systems = check_systems(systems)
    na, da = _sample_vectors(_one_quat(q_a, "q_a"), systems)
    nb, db = _sample_vectors(_one_quat(q_b, "q_b"), systems)
    gbn = boundary_plane_normals(trace_angle_deg, boundary_inclination_deg)

    def lines(n):
        line = np.cross(n, gbn)
        norm = np.linalg.norm(line, axis=1, keepdims=True)
        return np.where(norm > 1e-12, line / np.where(norm > 1e-12, norm, 1.0), 0.0)

    return np.abs(lines(na) @ lines(nb).T) * np.abs(da @ db.T)


def transmission_summaries(grain_quats, grain_a, grain_b, systems: SlipSystems, *, factors=None, load_axis=None,
                           trace_angle_deg=None, boundary_inclination_deg=90.0,
                           burgers_nm=None) -> dict[str, np.ndarray]:
    """Vectorised transmission summaries for many boundaries, both directions.

    Parameters
    ----------
    grain_quats : (n_grains, 4) array_like
        Grain orientations (NaN rows: grains not analysed; their boundaries get NaN / −1).
    grain_a, grain_b : (n_b,) int array_like
        The two grains of each boundary.
    systems
        Catalogue.
    factors : (n_grains, n_sys) array_like, optional
        Signed Schmid factors per grain; computed from ``load_axis`` if not given.
    load_axis : (3,) array_like, optional
        Map frame; needed when ``factors`` is None.
    trace_angle_deg : (n_b,) array_like, optional
        Boundary surface traces for the Shen factor (0° if None).
    boundary_inclination_deg : float or (n_b,) array_like
        Assumed boundary-plane inclination to the surface (90 = perpendicular).
    burgers_nm : float or (n_b,) array_like, optional
        Burgers vector length; in lattice parameters (``systems.burgers_length``) if None.

    Returns
    -------
    dict of ndarrays
        Column 0 = A→B, column 1 = B→A: ``m_prime`` (n_b, 2) |m′| of the most-stressed incoming
        system with its best partner, ``slip_out`` (n_b, 2) that partner, ``score`` (n_b, 2) the
        transmission score (module docstring), ``score_system`` (n_b, 2), ``residual_burgers``
        (n_b, 2), ``shen`` (n_b, 2) for the (incoming, best-partner) pair, ``slip_in`` (n_b, 2);
        ``m_prime_max`` (n_b,) the largest |m′| over all pairs.
    """
    systems = check_systems(systems)
    q = np.ascontiguousarray(np.asarray(grain_quats, dtype=float))
    if q.ndim != 2 or q.shape[1] != 4:
        raise ParameterError(f"grain_quats should have shape (n_grains, 4); got {q.shape}")
    ga = np.ascontiguousarray(np.asarray(grain_a, dtype=np.int64).reshape(-1))
    gb = np.ascontiguousarray(np.asarray(grain_b, dtype=np.int64).reshape(-1))
    if ga.shape != gb.shape:
        raise ParameterError(f"grain_a and grain_b should have the same length; got {ga.size} and {gb.size}")
    if ga.size and (min(ga.min(), gb.min()) < 0 or max(ga.max(), gb.max()) >= q.shape[0]):
        raise ParameterError(f"grain ids should lie in 0..{q.shape[0] - 1}")
    if factors is None:
        if load_axis is None:
            raise ParameterError("give either factors (n_grains, n_sys) or load_axis")
        factors = schmid_factors(q, load_axis, systems)
    f = np.asarray(factors, dtype=float)
    if f.shape != (q.shape[0], len(systems)):
        raise ParameterError(f"factors should have shape {(q.shape[0], len(systems))}; got {f.shape}")
    ok = np.all(np.isfinite(f), axis=1)
    eff = np.ascontiguousarray(effective_schmid(np.where(ok[:, None], f, 0.0), systems))
    in_sys = np.ascontiguousarray(np.argmax(eff, axis=1).astype(np.int64))
    n_b = ga.size
    th = np.zeros(n_b) if trace_angle_deg is None else np.broadcast_to(np.asarray(trace_angle_deg, float), (n_b,))
    gbn = np.ascontiguousarray(boundary_plane_normals(np.nan_to_num(th),
                                                      np.broadcast_to(boundary_inclination_deg, (n_b,))))
    blen = systems.burgers_length if burgers_nm is None else np.asarray(burgers_nm, float)
    burgers = np.ascontiguousarray(np.broadcast_to(blen, (n_b,)), dtype=float)
    qk = q.copy()
    qk[~ok] = np.nan
    out = {
        "m_prime": np.empty((n_b, 2)), "slip_out": np.empty((n_b, 2), np.int64), "score": np.empty((n_b, 2)),
        "score_system": np.empty((n_b, 2), np.int64), "residual_burgers": np.empty((n_b, 2)),
        "shen": np.empty((n_b, 2)), "m_prime_max": np.empty(n_b),
    }
    _k.boundary_summary_rows(
        kernel_input(qk), kernel_input(ga, np.int64), kernel_input(gb, np.int64), kernel_input(eff),
        kernel_input(in_sys, np.int64), kernel_input(systems.normals), kernel_input(systems.directions),
        kernel_input(gbn), kernel_input(burgers), 1.0 / systems.max_effective,
        out["m_prime"], out["slip_out"], out["score"], out["score_system"], out["residual_burgers"], out["shen"],
        out["m_prime_max"],
    )
    out["shen"][~np.isfinite(th)] = np.nan  # no trace, no assumed boundary plane
    slip_in = np.stack([in_sys[ga], in_sys[gb]], axis=1)
    bad = ~(ok[ga] & ok[gb])
    slip_in[bad] = -1
    out["slip_in"] = slip_in
    return out


