"""Barriers along a growth path: their strengths, the amplitudes that pass them, where slip crosses,
and the state of the blocked plastic zone at every crack length (Navarro & de los Rios 1988)."""

from __future__ import annotations

import numpy as np

from slipnet.errors import ParameterError
from slipnet.growth.path import GrowthPath
from slipnet.growth.strip_yield import (
    GrowthParameters,
    _check_amplitude,
    _params,
    plastic_zone_ratio,
    sliding_displacement,
)

__all__ = ["ARRESTED", "BLOCKED", "SPREADING", "barrier_strengths", "crossing_lengths", "localisation_factor",
           "threshold_amplitudes", "zone_state"]


#: Zone states written in the ``zone_state`` column.
BLOCKED = "blocked"


SPREADING = "spreading"


ARRESTED = "arrested"


def barrier_strengths(path: GrowthPath, params: GrowthParameters | None = None) -> np.ndarray:
    """Critical stress S_c,k (MPa) on the source beyond each barrier.

    S_c,k = S_c · (f₀ / f_{k+1}) · (1 + k_m (1 − |m′_k|) + k_α sin α_k) · scale_k

    with f the grain orientation factors (Schmid-type; the ratio follows the m_i/m_1 weighting of
    Navarro & de los Rios 1988, written for Schmid rather than Taylor-type factors), |m′| of
    Luster & Morris (1995) and the twist α of Zhai, Wilkinson & Martin (2000). The linear coupling to
    |m′| and sin α is our own assumption.

    Returns
    -------
    ndarray
        (k,) MPa.
    """
    p = _params(params)
    f = path.grain_factors
    weight = 1.0 + p.transmission_weight * (1.0 - path.m_prime) + p.twist_weight * np.abs(
        np.sin(np.radians(path.twist_deg)))
    return p.barrier_stress * (f[0] / f[1:]) * weight * path.strength_scale


def threshold_amplitudes(path: GrowthPath, params: GrowthParameters | None = None) -> np.ndarray:
    """Stress amplitude (MPa) below which a crack that reaches barrier k arrests there.

    With the zone blocked at c = d_k, the stress on the source at r₀ beyond it is, to leading order,
    S = (σ − (2σ_f/π) arccos n) √(c / 2r₀) (Navarro & de los Rios 1988). It is largest as the tip
    reaches the barrier (n → 1, arccos n → 0), so slip can cross only if σ √(d_k/2r₀) ≥ S_c,k:

        σ_th,k = S_c,k √(2 r₀ / d_k)

    (for equal barriers, the 1/√i fall with grain number i of Navarro & de los Rios 1988). The
    condition is linear in σ, so no numerical root-finding is needed. The amplitude that lets a crack
    pass barriers 0..k is ``np.maximum.accumulate`` of this.

    Returns
    -------
    ndarray
        (k,) MPa.
    """
    p = _params(params)
    return barrier_strengths(path, p) * np.sqrt(2.0 * p.source_distance / path.barrier_positions_um)


def crossing_lengths(path: GrowthPath, stress_amplitude: float, params: GrowthParameters | None = None) -> np.ndarray:
    """Crack length (µm) at which slip crosses each barrier; ``inf`` where the crack arrests first.

    Blocked at d_k, slip crosses when σ − (2σ_f/π) arccos(a/d_k) ≥ σ_th,k, i.e. at
    a_k = d_k cos(π(σ − σ_th,k)/(2σ_f)). A barrier can only be reached once the earlier ones are
    crossed, so the crossing lengths are the running maximum; after the first arrest all are ``inf``.

    Returns
    -------
    ndarray
        (k,) µm, nondecreasing.
    """
    p = _params(params)
    s = _check_amplitude(stress_amplitude, p)
    d = path.barrier_positions_um
    sth = threshold_amplitudes(path, p)
    with np.errstate(invalid="ignore"):
        root = d * np.cos(0.5 * np.pi * (s - sth) / p.friction_stress)
    root = np.where(s >= sth, root, np.inf)
    return np.maximum.accumulate(root) if root.size else root


def localisation_factor(path: GrowthPath, crack_length, params: GrowthParameters | None = None
                        ) -> tuple[np.ndarray, np.ndarray]:
    """Rate factor of the localisation zones on the path, and the zone each crack length is in.

    A short crack slows as it approaches a zone of strain localisation ahead of its tip (the zone takes
    up the cyclic slip the tip would otherwise make), speeds up again once it has crossed the zone's
    centre, and slows again at the next zone (common practice, as reported from in-situ strain mapping
    of short cracks in ferritic steel). With centre c, approach width w and strength A of each zone:

        F(a) = Π_z (1 − R · A_z · h_z(a)),  h_z = exp(−½((a − c_z)/w_z)²) for a ≤ c_z,
                                               exp(−½((a − c_z)/(ρ w_z))²) for a > c_z,

    R = ``zone_retardation``, ρ = ``zone_recovery`` (our form of the reported behaviour).

    Returns
    -------
    factor : (p,) ndarray
        In (0, 1]; 1 without zones.
    zone : (p,) int ndarray
        Index of the zone whose window (c − 2w … c + 2ρw) holds each length, −1 outside every window.
    """
    p = _params(params)
    a = np.asarray(crack_length, dtype=float).reshape(-1)
    factor = np.ones(a.shape)
    zone = np.full(a.shape, -1, np.int64)
    c, w, amp = path.zone_positions_um, path.zone_widths_um, path.zone_strengths
    if c.size == 0 or p.zone_retardation == 0:
        return factor, zone
    u = a[:, None] - c[None, :]
    width = np.where(u <= 0, w[None, :], p.zone_recovery * w[None, :])
    h = np.exp(-0.5 * (u / width) ** 2)
    factor = np.prod(1.0 - p.zone_retardation * amp[None, :] * h, axis=1)
    inside = (u >= -2.0 * w[None, :]) & (u <= 2.0 * p.zone_recovery * w[None, :])
    zone = np.where(inside.any(axis=1), np.argmax(np.where(inside, h, -1.0), axis=1), -1)
    return factor, zone.astype(np.int64)


def zone_state(
    path: GrowthPath,
    crack_length,
    stress_amplitude: float,
    params: GrowthParameters | None = None,
    *,
    crossings: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Where the plastic zone ends for each crack length, and the resulting CTSD and rate.

    Parameters
    ----------
    path
        The path.
    crack_length
        (p,) crack lengths a along the path (µm), > 0.
    stress_amplitude
        σ (MPa).
    params
        Model constants.
    crossings
        Precomputed :func:`crossing_lengths` (optional).

    Returns
    -------
    dict
        ``zone_end`` (p,) µm, ``n_ratio`` (p,), ``blocked`` (p,) bool, ``barrier`` (p,) int index of
        the blocking barrier (−1 when spreading), ``grain_index`` (p,) index of the grain holding the tip,
        ``ctsd`` (p,) µm, ``dadn`` (p,) µm/cycle (times the localisation factor), ``arrested`` (p,) bool (tip
        at or past an arrest barrier), ``zone_factor`` (p,) and ``zone`` (p,) of :func:`localisation_factor`.
    """
    p = _params(params)
    s = _check_amplitude(stress_amplitude, p)
    a = np.asarray(crack_length, dtype=float).reshape(-1)
    if a.size == 0 or np.any(~np.isfinite(a)) or np.any(a <= 0):
        raise ParameterError("crack_length should be finite and > 0 µm")
    d = path.barrier_positions_um
    x = crossing_lengths(path, s, p) if crossings is None else crossings
    c_eq = a / plastic_zone_ratio(s, p.friction_stress)
    # first barrier the free zone would not reach, and first barrier not yet crossed: both indices are
    # ≥ the grain holding the tip because every barrier behind the tip is at < a < c_eq and crossed.
    k_free = np.searchsorted(d, c_eq, side="left")
    k_block = np.searchsorted(x, a, side="right")
    blocked = k_block < k_free
    kb = np.minimum(k_block, max(d.size - 1, 0))
    zone_end = np.where(blocked, d[kb] if d.size else c_eq, c_eq)
    arrest_at = np.flatnonzero(~np.isfinite(x))
    arrested = a >= d[arrest_at[0]] if arrest_at.size else np.zeros(a.shape, bool)
    zone_end = np.where(arrested, a, np.maximum(zone_end, a))
    ctsd = sliding_displacement(a, zone_end, s, p.friction_stress, shear_modulus=p.shear_modulus,
                                poisson_ratio=p.poisson_ratio)
    ctsd = np.where(arrested, 0.0, ctsd)
    zfac, zidx = localisation_factor(path, a, p)
    return {
        "zone_end": zone_end,
        "n_ratio": a / zone_end,
        "blocked": blocked | arrested,
        "barrier": np.where(blocked | arrested, np.where(arrested, arrest_at[0] if arrest_at.size else -1, k_block),
                            -1),
        "grain_index": np.searchsorted(d, a, side="right"),
        "ctsd": ctsd,
        "dadn": p.coefficient * ctsd**p.exponent * zfac,
        "arrested": arrested,
        "zone_factor": zfac,
        "zone": zidx,
    }
