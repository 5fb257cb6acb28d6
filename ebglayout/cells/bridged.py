"""Patch tied to the plane by narrow inductive bridges on the two sides no trace crosses.

The traces cross the slot strips at the patch's ends in u; bridges sit on the
long sides (v = +-across/2), evenly spread along u.  A bridge longer than the slot
reaches into a pocket cut into the patch edge, with the slot running round it at
full width, so its length is exactly ``bridge.length``.
"""
from __future__ import annotations

from shapely.geometry import Polygon, box
from shapely.ops import unary_union

from ..spec import FilterSpec
from .shape import CellShape, rectangle


def bridge_positions(along: float, per_side: int) -> list[float]:
    """u of each bridge centre: the patch length split into equal shares, one bridge per share."""
    return [along * ((k + 0.5) / per_side - 0.5) for k in range(per_side)]


def bridged_cell(spec: FilterSpec, size: tuple[float, float]) -> CellShape:
    along, across = size
    slot, width, length = spec.slot, spec.bridge_width, spec.bridge_length
    pocket_depth = length - slot
    half = across / 2
    pockets: list[Polygon] = []
    bridges: list[Polygon] = []
    for u in bridge_positions(along, spec.bridges_per_side):
        for side in (1, -1):
            edge = side * half
            inner = edge - side * pocket_depth
            outer = edge + side * slot
            bridges.append(box(u - width / 2, min(inner, outer), u + width / 2, max(inner, outer)))
            if pocket_depth > 0:
                pockets.append(box(u - width / 2 - slot, min(inner, edge), u + width / 2 + slot, max(inner, edge)))
    patch = rectangle(along, across)
    if pockets:
        patch = patch.difference(unary_union(pockets))
    return CellShape(patch=patch, bridges=tuple(bridges), outer=rectangle(along + 2 * slot, across + 2 * slot))
