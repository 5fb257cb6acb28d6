"""Floating rectangular patch inside a rectangular slot ring."""
from __future__ import annotations

from ..spec import FilterSpec
from .shape import CellShape, rectangle


def straight_cell(spec: FilterSpec, size: tuple[float, float]) -> CellShape:
    """A floating patch ``size`` = (along, across) with a slot of ``spec.slot`` all round."""
    along, across = size
    return CellShape(
        patch=rectangle(along, across),
        bridges=(),
        outer=rectangle(along + 2 * spec.slot, across + 2 * spec.slot),
    )
