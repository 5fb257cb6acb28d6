"""Cell builders, one per style; each maps (spec, patch size) to a local ``CellShape``."""
from __future__ import annotations

from typing import Callable

from ..spec import FilterSpec
from .bridged import bridged_cell
from .shape import CellShape, rectangle
from .straight import straight_cell

CellBuilder = Callable[[FilterSpec, tuple[float, float]], CellShape]

BUILDERS: dict[str, CellBuilder] = {
    "straight": straight_cell,
    "folded": straight_cell,
    "bridged": bridged_cell,
}
"""Style name -> builder.  A folded filter uses plain cells; what differs is its route (fold.py)."""

__all__ = ["BUILDERS", "CellBuilder", "CellShape", "rectangle"]
