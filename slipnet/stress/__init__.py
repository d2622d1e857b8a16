"""Local stresses: the full-field anisotropic elastic solve, local slip quantities from it, and
crystal plasticity (monotonic explicit, and cyclic implicit with FIPs and slip bands).
"""

from __future__ import annotations

from slipnet.stress.constants import (
    AUSTENITE_CONSTANTS,
    DEFAULT_CONSTANTS,
    IRON_CONSTANTS,
    CubicConstants,
    directional_modulus,
    from_mandel,
    rotate_stiffness,
    to_mandel,
    voigt_reuss_hill,
)
from slipnet.stress.cyclic import (
    CyclicField,
    CyclicMaterial,
    cyclic_assumptions,
    solve_cyclic,
    solve_monotonic,
)
from slipnet.stress.elastic import (
    StressField,
    assumptions_text,
    solve_elastic,
)
from slipnet.stress.local import (
    default_systems,
    edge_concentration,
    grain_schmid_factors,
    grain_stress_table,
    local_resolved_shear,
    local_schmid_factors,
    stress_concentration,
    uniform_schmid_factors,
)

__all__ = [
    "AUSTENITE_CONSTANTS",
    "DEFAULT_CONSTANTS",
    "IRON_CONSTANTS",
    "CubicConstants",
    "CyclicField",
    "CyclicMaterial",
    "StressField",
    "assumptions_text",
    "cyclic_assumptions",
    "default_systems",
    "directional_modulus",
    "edge_concentration",
    "from_mandel",
    "grain_schmid_factors",
    "grain_stress_table",
    "local_resolved_shear",
    "local_schmid_factors",
    "rotate_stiffness",
    "solve_cyclic",
    "solve_elastic",
    "solve_monotonic",
    "stress_concentration",
    "to_mandel",
    "uniform_schmid_factors",
    "voigt_reuss_hill",
]
