"""The strip-yield pieces of the growth model and its constants.

Plastic zone ratio n = a/c of a crack in equilibrium with a friction stress (Bilby, Cottrell &
Swinden 1963) and the crack tip sliding displacement that drives growth; the equations and their
sources are in ``docs/growth-model.md``.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from slipnet._checks import check_positive, check_range
from slipnet.errors import ParameterError

__all__ = ["GrowthParameters", "plastic_zone_ratio", "sliding_displacement"]


def _as_stress(stress, name: str = "stress") -> np.ndarray:
    try:
        s = np.asarray(stress, dtype=float)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{name} should be a number or array of numbers (MPa); got {stress!r}") from err
    if not np.all(np.isfinite(s)):
        raise ParameterError(f"{name} should be finite (MPa); got {stress!r}")
    if np.any(s < 0):
        raise ParameterError(f"{name} should be >= 0 MPa (an amplitude); got a negative value {s.min():g}")
    return s


def plastic_zone_ratio(stress, friction_stress: float) -> np.ndarray | float:
    """Unblocked strip-yield ratio n = a/c = cos(πσ / (2σ_f)).

    Bilby, Cottrell & Swinden (1963), Proc. R. Soc. A 272:304: a crack of half-length ``a`` with a
    slip band (plastic zone) to ``c`` resisting slip with friction stress σ_f is in equilibrium
    under the applied stress σ when the stress singularity at ``c`` vanishes.

    Parameters
    ----------
    stress
        Applied stress σ (MPa), scalar or array of any shape, 0 ≤ σ < σ_f.
    friction_stress
        Friction stress σ_f (MPa), > 0.

    Returns
    -------
    float or ndarray
        n in (0, 1], same shape as ``stress``.

    Raises
    ------
    ParameterError
        Negative stress, or σ ≥ σ_f (the zone would grow without bound: general yield).
    """
    sf = check_positive(friction_stress, "friction_stress")
    s = _as_stress(stress)
    if np.any(s >= sf):
        raise ParameterError(
            f"stress should be below friction_stress={sf:g} MPa (n = cos(πσ/2σ_f) is undefined at general "
            f"yield); got {s.max():g} MPa"
        )
    n = np.cos(0.5 * np.pi * s / sf)
    return float(n) if n.ndim == 0 else n


def sliding_displacement(
    crack_length,
    zone_end,
    stress,
    friction_stress: float,
    *,
    shear_modulus: float = 82.0,
    poisson_ratio: float = 0.29,
) -> np.ndarray:
    """Crack tip sliding displacement φ (µm) of a strip-yield crack whose zone ends at ``zone_end``.

    φ = (2(1−ν)/G) · c · [ (2σ_f/π) n ln(1/n) + (σ − (2σ_f/π) arccos n) √(1 − n²) ],  n = a/c.

    The first term is the Bilby–Cottrell–Swinden (1963) / Dugdale tip displacement of a zone in
    equilibrium; the second adds the slip of the unbalanced stress σ − (2σ_f/π) arccos n carried by
    a zone blocked at a barrier (Navarro & de los Rios 1988 structure). The constant was derived
    here by superposing the two solutions (see ``docs/growth-model.md``), edge dislocations assumed.

    Parameters
    ----------
    crack_length, zone_end
        a and c (µm), broadcastable arrays, 0 < a ≤ c.
    stress
        Applied stress amplitude σ (MPa).
    friction_stress
        σ_f (MPa).
    shear_modulus
        G (GPa).
    poisson_ratio
        ν.

    Returns
    -------
    ndarray
        φ (µm), broadcast shape of the inputs; 0 where a = c.
    """
    a = np.asarray(crack_length, dtype=float)
    c = np.asarray(zone_end, dtype=float)
    s = _as_stress(stress)
    sf = check_positive(friction_stress, "friction_stress")
    g = check_positive(shear_modulus, "shear_modulus") * 1e3  # GPa → MPa
    nu = check_range(poisson_ratio, "poisson_ratio", -1.0, 0.5, inclusive=False)
    if np.any(a <= 0) or np.any(c < a):
        raise ParameterError("crack_length should be > 0 µm and zone_end >= crack_length")
    n = np.clip(a / c, 1e-300, 1.0)
    unbalanced = s - (2.0 * sf / np.pi) * np.arccos(n)
    with np.errstate(divide="ignore", invalid="ignore"):
        nlog = np.where(n < 1.0, -n * np.log(n), 0.0)
    phi = (2.0 * (1.0 - nu) / g) * c * ((2.0 * sf / np.pi) * nlog + unbalanced * np.sqrt(np.clip(1.0 - n * n, 0, None)))
    return np.clip(phi, 0.0, None)


@dataclass(frozen=True)
class GrowthParameters:
    """Constants of the growth model (defaults are illustrative, for a ferritic steel; calibrate them).

    Attributes
    ----------
    friction_stress
        σ_f, friction stress of the strip-yield zone (MPa, in applied-stress-amplitude units).
    coefficient
        C in da/dN = C φ^m (µm/cycle per µm^m).
    exponent
        m in da/dN = C φ^m.
    barrier_stress
        S_c, stress on a source beyond a neutral barrier (|m′| = 1, no twist, equal orientation factors)
        needed to start slip there (MPa).
    source_distance
        r₀, distance of that source beyond the barrier (µm).
    shear_modulus
        G (GPa); α-iron about 82 GPa (from memory).
    poisson_ratio
        ν; iron about 0.29 (from memory).
    transmission_weight
        k_m: critical stress multiplied by 1 + k_m(1 − |m′|) + k_α sin(twist) (our coupling).
    twist_weight
        k_α of the same coupling.
    zone_retardation
        R in [0, 1): the largest relative fall of the rate at the centre of a strain-localisation zone of
        strength 1 on the path (the rate there is (1 − R) of the unretarded rate; our assumption, 0.5).
    zone_recovery
        ρ > 0: the rate recovers past a zone's centre over ρ times the zone's approach width (0.5: the
        rate picks up faster after the centre than it fell on the approach; common practice, as
        reported from in-situ strain mapping of short cracks in ferritic steel).
    """

    friction_stress: float = 400.0
    coefficient: float = 0.05
    exponent: float = 1.5
    barrier_stress: float = 500.0
    source_distance: float = 1.0
    shear_modulus: float = 82.0
    poisson_ratio: float = 0.29
    transmission_weight: float = 0.5
    twist_weight: float = 0.5
    zone_retardation: float = 0.5
    zone_recovery: float = 0.5

    def __post_init__(self) -> None:
        for name in ("friction_stress", "coefficient", "exponent", "barrier_stress", "source_distance",
                     "shear_modulus"):
            object.__setattr__(self, name, check_positive(getattr(self, name), name))
        for name in ("transmission_weight", "twist_weight"):
            object.__setattr__(self, name, check_positive(getattr(self, name), name, allow_zero=True))
        object.__setattr__(self, "zone_retardation",
                           check_range(self.zone_retardation, "zone_retardation", 0.0, 1.0, inclusive=False)
                           if self.zone_retardation != 0 else 0.0)
        object.__setattr__(self, "zone_recovery", check_positive(self.zone_recovery, "zone_recovery"))
        object.__setattr__(self, "poisson_ratio",
                           check_range(self.poisson_ratio, "poisson_ratio", -1.0, 0.5, inclusive=False))


def _params(params: GrowthParameters | None, **overrides) -> GrowthParameters:
    base = params if params is not None else GrowthParameters()
    given = {k: v for k, v in overrides.items() if v is not None}
    return replace(base, **given) if given else base


def _check_amplitude(stress_amplitude: float, p: GrowthParameters) -> float:
    s = _as_stress(stress_amplitude, "stress_amplitude")
    if s.ndim != 0:
        raise ParameterError("stress_amplitude should be a single number (MPa)")
    s = float(s)
    if s <= 0:
        raise ParameterError(f"stress_amplitude should be > 0 MPa; got {s:g}")
    if s >= p.friction_stress:
        raise ParameterError(
            f"stress_amplitude should be below friction_stress={p.friction_stress:g} MPa (the strip-yield "
            f"zone is unbounded at σ ≥ σ_f); got {s:g} MPa"
        )
    return s
