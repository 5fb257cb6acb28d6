"""Where a trace meets the slots of one plane cut, measured on the polygons.

A piece of trace centre-line inside a slot is:
- ``full``: it enters from one copper body and leaves onto another (plane ->
  patch, patch -> plane, patch -> neighbouring patch): the return current must
  jump the gap, which is what makes the cell work;
- ``along``: it enters and leaves on the same copper body (runs along or grazes
  the slot): an error of its own;
- ``ends``: the trace ends inside the slot.
Works on any PlaneCut, whether the engine built it or it was read from a board.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely
from shapely.geometry import LineString

TOUCH_MM = 2e-6
"""Two things closer than this (two grid steps) touch."""
CORNER_REACH_MM = 2.0
"""Patch corners this close to a crossing are measured directly; only a crossing with none searches further."""


@dataclass(frozen=True)
class Crossing:
    """One piece of a trace inside a slot, with what the checks need to judge it."""

    layer: str
    polarity: str
    kind: str
    point: tuple[float, float]
    s_trace: float
    s_centre: float
    length: float
    angle_deg: float
    corner_distance: float
    bodies: tuple[str, str]


def find_crossings(trace_line: LineString, polarity: str, trace_width: float, cut, centre: LineString) -> list[Crossing]:
    """All pieces of ``trace_line`` inside ``cut.slot``, in order along the trace."""
    if cut.slot.is_empty:
        return []
    index = getattr(cut, "slot_index", None) or SlotIndex(cut)
    near = index.slot_tree.query(trace_line, predicate="intersects")
    lines = [g for inside in shapely.intersection(trace_line, index.slots[np.sort(near)])
             for g in getattr(inside, "geoms", [inside]) if isinstance(g, LineString) and g.length > 0]
    if not lines:
        return []
    merged = shapely.line_merge(shapely.multilinestrings(lines)) if len(lines) > 1 else lines[0]
    pieces = _along(np.array(getattr(merged, "geoms", [merged]), dtype=object), trace_line)
    coords, owner = shapely.get_coordinates(pieces, return_index=True)
    head = np.searchsorted(owner, np.arange(len(pieces)))
    tail = np.append(head[1:], len(coords)) - 1
    first, last = coords[head], coords[tail]
    enter = _unit(coords[head + 1] - first)
    leave = _unit(last - coords[tail - 1])
    dist_a, edge_a = index.nearest_edges(first)
    dist_b, edge_b = index.nearest_edges(last)
    ends = np.asarray(trace_line.coords)[[0, -1]]
    on_a = (dist_a < TOUCH_MM) & (np.hypot(*(first - ends[0]).T) > TOUCH_MM)
    on_b = (dist_b < TOUCH_MM) & (np.hypot(*(last - ends[1]).T) > TOUCH_MM)
    # Step a hair outside the slot, back along the trace, to see which copper it came from / goes to.
    body_a = index.bodies_at(first - 5 * TOUCH_MM * enter)
    body_b = index.bodies_at(last + 5 * TOUCH_MM * leave)
    angles = np.minimum(_angles(enter, edge_a), _angles(leave, edge_b))
    mids = shapely.line_interpolate_point(pieces, 0.5, normalized=True)
    mid_xy = shapely.get_coordinates(mids).tolist()
    lengths = shapely.length(pieces).tolist()
    corners = index.corner_distances(shapely.buffer(pieces, trace_width / 2, cap_style="flat"))
    s_trace = shapely.line_locate_point(trace_line, mids)
    s_centre = shapely.line_locate_point(centre, mids)
    out = []
    for k in range(len(pieces)):
        if not (on_a[k] and on_b[k]):
            kind = "ends"
        elif body_a[k] != body_b[k]:
            kind = "full"
        else:
            kind = "along"
        mx, my = mid_xy[k]
        out.append(Crossing(
            layer=cut.layer, polarity=polarity, kind=kind, point=(round(mx, 6), round(my, 6)),
            s_trace=float(s_trace[k]), s_centre=float(s_centre[k]), length=lengths[k],
            angle_deg=float(angles[k]), corner_distance=float(corners[k]), bodies=(body_a[k], body_b[k]),
        ))
    return out


def _along(pieces: np.ndarray, trace: LineString) -> np.ndarray:
    """The pieces in order along the trace, each turned to run in the trace's direction of travel."""
    s_first = shapely.line_locate_point(trace, shapely.get_point(pieces, 0))
    s_last = shapely.line_locate_point(trace, shapely.get_point(pieces, -1))
    order = np.argsort(s_first, kind="stable")
    backwards = s_first[order] > s_last[order]
    out = pieces[order]
    out[backwards] = shapely.reverse(out[backwards])
    return out


def _unit(vectors: np.ndarray) -> np.ndarray:
    norm = np.hypot(vectors[:, 0], vectors[:, 1])
    return vectors / np.where(norm > 0, norm, 1.0)[:, None]


class SlotIndex:
    """One cut's slot-boundary edges, copper bodies (patches, bridges) and convex patch corners, indexed.

    Built once per cut (``PlaneCut.slot_index``) and shared by both traces and every re-measure.
    """

    def __init__(self, cut):
        coords, _, last = _ring_points(cut.slot)
        self.segments = np.stack([coords[~last], coords[np.flatnonzero(~last) + 1]], axis=1)
        self.edge_tree = shapely.STRtree(shapely.linestrings(self.segments))
        self.slots = np.array(cut.slot.geoms, dtype=object)
        self.slot_tree = shapely.STRtree(self.slots)
        self.bodies = (("patch", shapely.STRtree(list(cut.patch.geoms))),
                       ("bridge", shapely.STRtree(list(cut.bridge.geoms))))
        self.corners = _convex_corners(cut.patch)
        self.corner_tree = shapely.STRtree(self.corners) if len(self.corners) else None

    def nearest_edges(self, points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per point: distance to the nearest boundary edge and that edge's direction vector.

        A crossing's ends lie on the boundary, so the edges within touching distance
        are found by box lookup; a tie goes to the lower edge index, and a point away
        from every edge (a trace ending inside the slot) asks the tree for its nearest.
        """
        geoms = shapely.points(points)
        dist = np.full(len(points), np.inf)
        edge = np.full(len(points), -1)
        i, j = self.edge_tree.query(geoms, predicate="dwithin", distance=TOUCH_MM)
        if len(i):
            d = _segment_distances(points[i], self.segments[j])
            order = np.lexsort((j, d, i))
            first = np.unique(i[order], return_index=True)[1]
            dist[i[order][first]] = d[order][first]
            edge[i[order][first]] = j[order][first]
        far = np.flatnonzero(edge < 0)
        if len(far):
            (_, k), d = self.edge_tree.query_nearest(geoms[far], return_distance=True, all_matches=False)
            dist[far], edge[far] = d, k
        seg = self.segments[edge]
        return dist, seg[:, 1] - seg[:, 0]

    def bodies_at(self, probes: np.ndarray) -> list[str]:
        """Name of the copper body under each probe point: ``patch<i>``, ``bridge<i>`` or ``plane``."""
        names = ["plane"] * len(probes)
        points = shapely.points(probes)
        for name, tree in reversed(self.bodies):
            found, hit = tree.query(points, predicate="dwithin", distance=TOUCH_MM)
            best: dict[int, int] = {}
            for i, j in zip(found.tolist(), hit.tolist()):
                best[i] = min(j, best.get(i, j))
            for i, j in best.items():
                names[i] = f"{name}{j}"
        return names

    def corner_distances(self, bands: np.ndarray) -> np.ndarray:
        """Per trace band: distance to the nearest convex patch corner (inf without patches).

        Corners within ``CORNER_REACH_MM`` are found by box lookup and measured;
        a band with none asks the tree for its nearest.
        """
        if self.corner_tree is None:
            return np.full(len(bands), math.inf)
        dist = np.full(len(bands), math.inf)
        i, j = self.corner_tree.query(bands, predicate="dwithin", distance=CORNER_REACH_MM)
        if len(i):
            np.minimum.at(dist, i, shapely.distance(bands[i], self.corners[j]))
        far = np.flatnonzero(~np.isfinite(dist))
        if len(far):
            (_, _), dist[far] = self.corner_tree.query_nearest(bands[far], return_distance=True, all_matches=False)
        return dist


def _segment_distances(points: np.ndarray, segments: np.ndarray) -> np.ndarray:
    """Distance from each point to the matching segment (n, 2, 2)."""
    a, d = segments[:, 0], segments[:, 1] - segments[:, 0]
    length2 = np.einsum("ij,ij->i", d, d)
    t = np.clip(np.einsum("ij,ij->i", points - a, d) / np.where(length2 > 0, length2, 1.0), 0.0, 1.0)
    return np.hypot(*(points - a - t[:, None] * d).T)


def _angles(directions: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Angles in degrees (0..90) between trace directions and slot edges where the trace enters or leaves."""
    cos = np.abs(np.einsum("ij,ij->i", directions, edges)) / np.hypot(edges[:, 0], edges[:, 1])
    return np.degrees(np.arccos(np.minimum(1.0, cos)))


def _ring_points(geometry) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every ring vertex of a (multi)polygon, exteriors and holes in shapely's order, closing vertex included:
    (coordinates, ring number of each vertex, True at each ring's closing vertex)."""
    rings = shapely.get_rings(np.array(getattr(geometry, "geoms", [geometry]), dtype=object))
    coords, ring = shapely.get_coordinates(rings, return_index=True)
    last = np.append(ring[1:] != ring[:-1], True) if len(ring) else np.zeros(0, dtype=bool)
    return coords, ring, last


def _convex_corners(patch) -> np.ndarray:
    """Convex corners of the patch copper, as shapely points: where a crossing must keep its distance."""
    polys = np.array(getattr(patch, "geoms", [patch]), dtype=object)
    rings, polygon = shapely.get_rings(polys, return_index=True)
    if not len(rings):
        return np.array([])
    hole = np.append(False, polygon[1:] == polygon[:-1])
    turn = np.where(shapely.is_ccw(rings), 1.0, -1.0) * np.where(hole, -1.0, 1.0)
    coords, ring = shapely.get_coordinates(rings, return_index=True)
    keep = np.append(ring[1:] == ring[:-1], False)  # drop each ring's closing vertex
    coords, ring = coords[keep], ring[keep]
    start = np.searchsorted(ring, np.arange(len(rings)))
    size = np.bincount(ring, minlength=len(rings))
    k = np.arange(len(coords)) - start[ring]
    prev = coords[start[ring] + (k - 1) % size[ring]]
    nxt = coords[start[ring] + (k + 1) % size[ring]]
    cross = (coords[:, 0] - prev[:, 0]) * (nxt[:, 1] - coords[:, 1]) - (coords[:, 1] - prev[:, 1]) * (nxt[:, 0] - coords[:, 0])
    convex = (cross * turn[ring] > 1e-12) & (size[ring] >= 3)
    return shapely.points(coords[convex]) if convex.any() else np.array([])
