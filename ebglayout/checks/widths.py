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


FACING_COS = 1e-3
"""Edges face each other when their inward normals are more than ~90.06 deg apart; the margin keeps the
right-angle corners of grid-snapped rotated rectangles (90 +- 1e-7 deg) out, as a mask DRC's 90-degree
ignore angle does."""


@dataclass(frozen=True)
class Narrow:
    """A place where a polygon is narrower than a limit: the width and the midpoint between the two edges."""

    width: float
    at: tuple[float, float]


def _edges(polygons: list) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Boundary edges of the polygons with each polygon's inside on their left: (starts, ends, polygon index).

    Exteriors run counter-clockwise and holes clockwise, as ``shapely.geometry.polygon.orient(p, 1.0)``
    would turn them; a ring the other way round has each edge's ends swapped.
    """
    rings, owner = shapely.get_rings(np.asarray(polygons, dtype=object), return_index=True)
    hole = np.append(False, owner[1:] == owner[:-1])
    flip = shapely.is_ccw(rings) == hole
    coords, ring = shapely.get_coordinates(rings, return_index=True)
    k = np.flatnonzero(np.append(ring[1:] == ring[:-1], False))
    a, b = coords[k], coords[k + 1]
    swap = flip[ring[k]]
    a[swap], b[swap] = coords[k + 1][swap], coords[k][swap]
    return a, b, owner[ring[k]]


PAIR_BLOCK = 1 << 20
"""Edge pairs measured per numpy block: bounds the memory of a polygon with thousands of edges."""


def _narrows(polygons: list, below: float | None = None) -> list[list[Narrow]]:
    """Facing-edge widths of each polygon, all of them or only those under ``below``, smallest first.

    With ``below``, only edge pairs whose boxes come closer than ``below`` are
    measured (one STRtree join over the edges of all the polygons): a width is
    the distance between two points of the two edges, so a pair farther apart
    cannot be narrower.  Pairs are measured in numpy blocks; for one pair the
    arithmetic is that of the edge-by-edge rule.
    """
    if below is not None and below <= 1e-9:
        return [[] for _ in polygons]
    a, b, owner = _edges(polygons)
    keep = np.hypot(*(b - a).T) > 1e-9
    a, b, owner = a[keep], b[keep], owner[keep]
    d = b - a
    length = np.linalg.norm(d, axis=1)
    t = d / length[:, None]
    inward = np.column_stack([-t[:, 1], t[:, 0]])
    if below is None:
        starts = np.searchsorted(owner, np.arange(len(polygons) + 1))
        blocks = (pair for k in range(len(polygons)) for pair in _all_pairs(int(starts[k]), int(starts[k + 1])))
    else:
        lo, hi = np.minimum(a, b), np.maximum(a, b)
        tree = shapely.STRtree(shapely.box(lo[:, 0], lo[:, 1], hi[:, 0], hi[:, 1]))
        i, j = tree.query(shapely.box(lo[:, 0] - below, lo[:, 1] - below, hi[:, 0] + below, hi[:, 1] + below))
        same = owner[i] == owner[j]
        i, j = i[same], j[same]
        order = np.lexsort((j, i))
        i, j = i[order], j[order]
        blocks = ((i[k:k + PAIR_BLOCK], j[k:k + PAIR_BLOCK]) for k in range(0, len(i), PAIR_BLOCK))
    found, mids, whose = [], [], []
    for i, j in blocks:
        width, mid, i = _measure(a, b, t, inward, length, i, j)
        if below is not None:
            near = width < below
            width, mid, i = width[near], mid[near], i[near]
        found.append(width)
        mids.append(mid)
        whose.append(owner[i])
    out: list[list[Narrow]] = [[] for _ in polygons]
    if not found:
        return out
    width, mid, whose = np.concatenate(found), np.concatenate(mids), np.concatenate(whose)
    if not len(width):
        return out
    # A width counts where its midpoint lies in the polygon, allowing 0.1 nm for the grid: most midpoints are
    # plainly inside; only the others are tried against the (costly) grown polygon.
    shapes = np.asarray(polygons, dtype=object)
    shapely.prepare(shapes)
    inside = shapely.contains_xy(shapes[whose], mid[:, 0], mid[:, 1])
    unsure = np.flatnonzero(~inside)
    if len(unsure):
        owners, back = np.unique(whose[unsure], return_inverse=True)
        grown = shapely.buffer(shapes[owners], 1e-7, join_style="mitre")
        inside[unsure] = shapely.contains_xy(grown[back], mid[unsure, 0], mid[unsure, 1])
    for k, w, (x, y) in zip(whose[inside].tolist(), width[inside].tolist(), mid[inside].tolist()):
        out[k].append(Narrow(w, (round(x, 6), round(y, 6))))
    for narrows in out:
        narrows.sort(key=lambda n: (round(n.width, 9), n.at))
    return out


def _all_pairs(first: int, stop: int):
    """Every (i, j) with both in [first, stop), row by row, in blocks of at most PAIR_BLOCK pairs."""
    n = stop - first
    rows = max(1, PAIR_BLOCK // max(n, 1))
    for r in range(first, stop, rows):
        count = min(rows, stop - r)
        yield np.repeat(np.arange(r, r + count), n), np.tile(np.arange(first, stop), count)


def _measure(a, b, t, inward, length, i, j) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Width, midpoint and first edge of the pairs (i, j) that face each other and overlap in projection.

    Edge j seen from edge i: the perpendicular distance above edge i at the two
    ends of their common projection; the width is the smaller, the midpoint lies
    halfway up from the middle of the common projection.  Pair order is kept.
    """
    facing = (inward[j, 0] * inward[i, 0] + inward[j, 1] * inward[i, 1]) < -FACING_COS
    i, j = i[facing], j[facing]
    pa, pb = a[j] - a[i], b[j] - a[i]
    ta = pa[:, 0] * t[i, 0] + pa[:, 1] * t[i, 1]
    tb = pb[:, 0] * t[i, 0] + pb[:, 1] * t[i, 1]
    na = pa[:, 0] * inward[i, 0] + pa[:, 1] * inward[i, 1]
    nb = pb[:, 0] * inward[i, 0] + pb[:, 1] * inward[i, 1]
    lo = np.maximum(np.minimum(ta, tb), 0.0)
    hi = np.minimum(np.maximum(ta, tb), length[i])
    overlap = hi - lo > 1e-9
    i, ta, tb, na, nb, lo, hi = i[overlap], ta[overlap], tb[overlap], na[overlap], nb[overlap], lo[overlap], hi[overlap]
    span = tb - ta
    flat = np.abs(span) < 1e-12
    safe = np.where(flat, 1.0, span)
    w_lo = np.where(flat, 0.5, (lo - ta) / safe)
    w_hi = np.where(flat, 0.5, (hi - ta) / safe)
    width = np.minimum(na + w_lo * (nb - na), na + w_hi * (nb - na))
    positive = width > 1e-9
    i, lo, hi, width = i[positive], lo[positive], hi[positive], width[positive]
    mid = a[i] + t[i] * ((lo + hi) / 2)[:, None] + inward[i] * (width / 2)[:, None]
    return width, mid, i


def min_width(geometry) -> Narrow | None:
    """The narrowest place of a (multi)polygon, or None if it has no facing edges."""
    return width_check(geometry, 0.0)[0]


def width_check(geometry, limit: float, tolerance: float = 1e-6) -> tuple[Narrow | None, list[Narrow]]:
    """The narrowest place of a (multi)polygon and the places narrower than ``limit`` (minus a grid tolerance).

    Searched with a growing distance bound (0.25 mm or twice ``limit`` if larger,
    doubled while nothing narrower was found, until the bound spans the polygon),
    so a polygon of thousands of edges costs its near edge pairs, not all of them;
    a polygon whose near pairs hold nothing under the narrowest place found so far
    cannot hold the narrowest and is not searched further.  The first pass already
    holds every place under ``limit``: one per distinct location, in polygon
    order, narrowest first.  Equal widths go to the polygon listed first.
    """
    polys = list(getattr(geometry, "geoms", [geometry]))
    if not polys:
        return None, []
    spans = [2 * float(np.hypot(x1 - x0, y1 - y0)) + 1.0 for x0, y0, x1, y1 in (p.bounds for p in polys)]
    best: tuple[int, Narrow] | None = None
    below: list[Narrow] = []
    todo, bound, first = list(range(len(polys))), max(0.25, 2 * limit), True
    while todo:
        near = [k for k in todo if bound < spans[k]]
        results = dict(zip(near, _narrows([polys[k] for k in near], below=bound))) if near else {}
        rest = [k for k in todo if k not in results]
        results.update(zip(rest, _narrows([polys[k] for k in rest])) if rest else ())
        if first and limit > 0:
            below = _distinct(n for k in sorted(results) for n in results[k] if n.width < limit - tolerance)
        first = False
        todo = []
        for k in sorted(results):
            widths = results[k]
            if widths and (k in rest or widths[0].width < bound - 1e-6):
                if best is None or (widths[0].width, k) < (best[1].width, best[0]):
                    best = (k, widths[0])
            elif k not in rest:
                todo.append(k)
        if best is not None:
            todo = [k for k in todo if best[1].width >= bound - 1e-6]
        bound *= 2
    return (best[1] if best else None), below


def _distinct(narrows) -> list[Narrow]:
    """The first narrow place at each location (rounded to 1 um)."""
    out: list[Narrow] = []
    seen: set[tuple[float, float]] = set()
    for n in narrows:
        key = (round(n.at[0], 3), round(n.at[1], 3))
        if key not in seen:
            seen.add(key)
            out.append(n)
    return out
