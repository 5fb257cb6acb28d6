"""The shape every cell builder returns, in the cell's local frame.

Local frame: u runs along the pair (the direction the traces cross the cell),
v across it, origin at the patch centre.  Placement rotates and moves the shape.
"""
from __future__ import annotations

from dataclasses import dataclass

from shapely.geometry import Polygon, box


@dataclass(frozen=True)
class CellShape:
    """Copper and cut of one cell: patch copper, bridge copper, and the slot's outer edge."""

    patch: Polygon
    bridges: tuple[Polygon, ...]
    outer: Polygon


def rectangle(along: float, across: float) -> Polygon:
    """Axis-aligned rectangle centred on the origin."""
    return box(-along / 2, -across / 2, along / 2, across / 2)
