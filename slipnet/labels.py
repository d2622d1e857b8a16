"""One printed identifier per grain, boundary, notch candidate and localisation site.

Every picture and table of a study report names things the same way: grain 12 is ``G12``,
boundary 143 (``boundary_id`` of the grain graph) is ``B143``, the notch candidate ranked first
is ``N1`` and the third localisation site forecast from it is ``N1-S3``.

Examples
--------
>>> grain_label(12), boundary_label(143), notch_label(1), site_label(1, 3)
('G12', 'B143', 'N1', 'N1-S3')
"""

from __future__ import annotations

__all__ = ["boundary_label", "grain_label", "notch_label", "site_label"]


def grain_label(grain: int) -> str:
    """``G<id>`` for a grain id of the grain graph (``"—"`` for −1, outside every grain)."""
    g = int(grain)
    return "—" if g < 0 else f"G{g}"


def boundary_label(boundary_id: int) -> str:
    """``B<id>`` for a ``boundary_id`` of the grain graph's boundary table."""
    return f"B{int(boundary_id)}"


def notch_label(rank: int) -> str:
    """``N<rank>`` for a notch candidate by its rank in the plan (1 = best)."""
    return f"N{int(rank)}"


def site_label(notch_rank: int, site_rank: int) -> str:
    """``N<rank>-S<k>``: the k-th localisation site forecast from notch candidate ``N<rank>``."""
    return f"{notch_label(notch_rank)}-S{int(site_rank)}"
