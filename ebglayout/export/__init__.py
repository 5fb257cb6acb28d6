"""File exporters: DXF, GDSII and an SVG/PNG preview, all in the layout's board coordinates (mm).

Every writer reads a built ``Layout`` and never re-derives geometry, so a cut
lands exactly under its pair.  Each file is written atomically: to a temporary
file in the same folder, then moved into place (``outputs.atomic_path``), so an error leaves no partial
file behind.  The submodules are imported on demand, so importing this package
pulls in neither ezdxf, gdstk nor Pillow.
"""
from __future__ import annotations

import math

from .. import CAUTION
from ..outputs import atomic_path

EXTENSIONS = ("dxf", "gds", "svg", "png")


class CellFrame:
    """A placed cell's local frame (u along the pair, v across, origin at the patch centre).

    Used to put dimension annotations on a cell's own axes; the geometry itself
    is only read (local bounds of the engine's polygons), never rebuilt.
    """

    def __init__(self, cell):
        self.origin = tuple(float(c) for c in cell.centre)
        angle = math.radians(cell.rotation_deg)
        self.cos, self.sin = math.cos(angle), math.sin(angle)

    def local(self, x: float, y: float) -> tuple[float, float]:
        dx, dy = x - self.origin[0], y - self.origin[1]
        return (dx * self.cos + dy * self.sin, -dx * self.sin + dy * self.cos)

    def board(self, u: float, v: float) -> tuple[float, float]:
        return (self.origin[0] + u * self.cos - v * self.sin, self.origin[1] + u * self.sin + v * self.cos)

    def direction(self, du: float, dv: float) -> tuple[float, float]:
        """A local direction turned onto the board."""
        return (du * self.cos - dv * self.sin, du * self.sin + dv * self.cos)

    def local_bounds(self, poly) -> tuple[float, float, float, float]:
        """(u0, v0, u1, v1) of a polygon's exterior in this frame."""
        pts = [self.local(x, y) for x, y in poly.exterior.coords]
        us, vs = [p[0] for p in pts], [p[1] for p in pts]
        return (min(us), min(vs), max(us), max(vs))


__all__ = ["CAUTION", "EXTENSIONS", "CellFrame", "atomic_path"]
