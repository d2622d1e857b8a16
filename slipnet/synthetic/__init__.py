"""Synthetic specimens from slipnet's own generator, and the invented demo scenario.
"""

from __future__ import annotations

from slipnet.synthetic.specimen import (
    Specimen,
    demo_specimen,
    make_specimen,
)

__all__ = [
    "Specimen",
    "demo_specimen",
    "make_specimen",
]
