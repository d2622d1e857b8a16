"""The containers the steps pass along: the orientation map, the grain graph made from it, measured
strain fields and the one notch shape.
"""

from __future__ import annotations

from slipnet.maps.grain_graph import (
    BoundaryPolylines,
    GrainGraph,
)
from slipnet.maps.notch import (
    MAX_OPENING_DEG,
    SIDES,
    NotchShape,
    notch_mask,
    side_notch,
)
from slipnet.maps.orientation_map import (
    GRIDS,
    STRUCTURES,
    OrientationMap,
    Phase,
    apply_frame_rotation,
)
from slipnet.maps.strain import (
    DISPLACEMENT_COMPONENTS,
    STRAIN_COMPONENTS,
    StrainSeries,
    equivalent_strain,
    max_shear_strain,
    strain_from_displacement,
)

__all__ = [
    "DISPLACEMENT_COMPONENTS",
    "GRIDS",
    "MAX_OPENING_DEG",
    "SIDES",
    "STRAIN_COMPONENTS",
    "STRUCTURES",
    "BoundaryPolylines",
    "GrainGraph",
    "NotchShape",
    "OrientationMap",
    "Phase",
    "StrainSeries",
    "apply_frame_rotation",
    "equivalent_strain",
    "max_shear_strain",
    "notch_mask",
    "side_notch",
    "strain_from_displacement",
]
