"""Width measurement on polygons, the way a mask DRC's width check does it.

For each boundary edge, every other edge that faces it from the inside and
overlaps it in projection gives a width: the perpendicular distance over the
overlap (the "projection" metric of mask DRC tools).  Exact for the sharp,
straight-edged polygons the engine builds, at any rotation.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely
from shapely.geometry.polygon import orient


FACING_COS = 1e-3
"""Edges face each other when their inward normals are more than ~90.06 deg apart; the margin keeps the
right-angle corners of grid-snapped rotated rectangles (90 +- 1e-7 deg) out, as a mask DRC's 90-degree
ignore angle does."""


@dataclass(frozen=True)
class Narrow:
    """A place where a polygon is narrower than a limit: the width and the midpoint between the two edges."""

    width: float
    at: tuple[float, float]


def _edges(polygon) -> np.ndarray:
    """Boundary edges oriented with the polygon's inside on their left: (n, 2, 2)."""
    polygon = orient(polygon, sign=1.0)
    rings = [polygon.exterior, *polygon.interiors]
    out = []
    for ring in rings:
        c = np.asarray(ring.coords)
        out.append(np.stack([c[:-1], c[1:]], axis=1))
    return np.concatenate(out)


def facing_widths(polygon) -> list[Narrow]:
    """Every facing-edge width of one polygon (one entry per facing edge pair, smallest first)."""
    e = _edges(polygon)
    a, b = e[:, 0], e[:, 1]
    d = b - a
    length = np.linalg.norm(d, axis=1)
    keep = length > 1e-9
    a, b, d, length = a[keep], b[keep], d[keep], length[keep]
    t = d / length[:, None]
    inward = np.column_stack([-t[:, 1], t[:, 0]])
    grown = polygon.buffer(1e-7, join_style="mitre")
    shapely.prepare(grown)
    found: list[Narrow] = []
    for i in range(len(a)):
        facing = (inward @ inward[i]) < -FACING_COS
        if not facing.any():
            continue
        js = np.nonzero(facing)[0]
        pa, pb = a[js] - a[i], b[js] - a[i]
        ta, tb = pa @ t[i], pb @ t[i]
        na, nb = pa @ inward[i], pb @ inward[i]
        lo = np.maximum(np.minimum(ta, tb), 0.0)
        hi = np.minimum(np.maximum(ta, tb), length[i])
        overlap = hi - lo > 1e-9
        for k in np.nonzero(overlap)[0]:
            # Perpendicular distance of edge j above edge i at the ends of the common projection.
            span = tb[k] - ta[k]
            dist = []
            for s in (lo[k], hi[k]):
                w = 0.5 if abs(span) < 1e-12 else (s - ta[k]) / span
                dist.append(na[k] + w * (nb[k] - na[k]))
            width = min(dist)
            if width <= 1e-9:
                continue
            s_mid = (lo[k] + hi[k]) / 2
            mid = a[i] + t[i] * s_mid + inward[i] * width / 2
            if not grown.contains(shapely.points(mid)):
                continue
            found.append(Narrow(float(width), (round(float(mid[0]), 6), round(float(mid[1]), 6))))
    found.sort(key=lambda n: (round(n.width, 9), n.at))
    return found


def min_width(geometry) -> Narrow | None:
    """The narrowest place of a (multi)polygon, or None if it has no facing edges."""
    best = None
    for poly in getattr(geometry, "geoms", [geometry]):
        widths = facing_widths(poly)
        if widths and (best is None or widths[0].width < best.width):
            best = widths[0]
    return best


def narrower_than(geometry, limit: float, tolerance: float = 1e-6) -> list[Narrow]:
    """Places narrower than ``limit`` (minus a grid tolerance), one per distinct location."""
    out: list[Narrow] = []
    seen: set[tuple[float, float]] = set()
    for poly in getattr(geometry, "geoms", [geometry]):
        for n in facing_widths(poly):
            if n.width < limit - tolerance:
                key = (round(n.at[0], 3), round(n.at[1], 3))
                if key not in seen:
                    seen.add(key)
                    out.append(n)
    return out
