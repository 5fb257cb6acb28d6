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
from shapely.ops import linemerge

TOUCH_MM = 2e-6
"""Two things closer than this (two grid steps) touch."""


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
    slot = cut.slot
    if slot.is_empty or not trace_line.intersects(slot):
        return []
    inside = trace_line.intersection(slot)
    lines = [g for g in getattr(inside, "geoms", [inside]) if isinstance(g, LineString) and g.length > 0]
    if not lines:
        return []
    merged = linemerge(lines) if len(lines) > 1 else lines[0]
    pieces = _along(list(getattr(merged, "geoms", [merged])), trace_line)

    index = getattr(cut, "slot_index", None) or SlotIndex(cut)
    coords = [np.asarray(p.coords) for p in pieces]
    first = np.array([c[0] for c in coords])
    last = np.array([c[-1] for c in coords])
    enter = _unit(np.array([c[1] - c[0] for c in coords]))
    leave = _unit(np.array([c[-1] - c[-2] for c in coords]))
    dist_a, edge_a = index.nearest_edges(first)
    dist_b, edge_b = index.nearest_edges(last)
    ends = np.asarray(trace_line.coords)[[0, -1]]
    on_a = (dist_a < TOUCH_MM) & (np.hypot(*(first - ends[0]).T) > TOUCH_MM)
    on_b = (dist_b < TOUCH_MM) & (np.hypot(*(last - ends[1]).T) > TOUCH_MM)
    # Step a hair outside the slot, back along the trace, to see which copper it came from / goes to.
    body_a = index.bodies_at(first - 5 * TOUCH_MM * enter)
    body_b = index.bodies_at(last + 5 * TOUCH_MM * leave)
    angles = np.minimum(_angles(enter, edge_a), _angles(leave, edge_b))
    geoms = np.array(pieces, dtype=object)
    mids = shapely.line_interpolate_point(geoms, 0.5, normalized=True)
    corners = index.corner_distances(shapely.buffer(geoms, trace_width / 2, cap_style="flat"))
    s_trace = shapely.line_locate_point(trace_line, mids)
    s_centre = shapely.line_locate_point(centre, mids)
    out = []
    for k, piece in enumerate(pieces):
        if not (on_a[k] and on_b[k]):
            kind = "ends"
        elif body_a[k] != body_b[k]:
            kind = "full"
        else:
            kind = "along"
        mx, my = shapely.get_coordinates(mids[k])[0].tolist()
        out.append(Crossing(
            layer=cut.layer, polarity=polarity, kind=kind, point=(round(mx, 6), round(my, 6)),
            s_trace=float(s_trace[k]), s_centre=float(s_centre[k]), length=piece.length,
            angle_deg=float(angles[k]), corner_distance=float(corners[k]), bodies=(body_a[k], body_b[k]),
        ))
    return out


def _along(pieces: list[LineString], trace: LineString) -> list[LineString]:
    """The pieces in order along the trace, each turned to run in the trace's direction of travel."""
    s_first = shapely.line_locate_point(trace, shapely.points([p.coords[0] for p in pieces]))
    s_last = shapely.line_locate_point(trace, shapely.points([p.coords[-1] for p in pieces]))
    out = []
    for k in sorted(range(len(pieces)), key=lambda k: s_first[k]):
        piece = pieces[k]
        out.append(LineString(piece.coords[::-1]) if s_first[k] > s_last[k] else piece)
    return out


def _unit(vectors: np.ndarray) -> np.ndarray:
    norm = np.hypot(vectors[:, 0], vectors[:, 1])
    return vectors / np.where(norm > 0, norm, 1.0)[:, None]


class SlotIndex:
    """One cut's slot-boundary edges, copper bodies (patches, bridges) and convex patch corners, indexed.

    Built once per cut (``PlaneCut.slot_index``) and shared by both traces and every re-measure.
    """

    def __init__(self, cut):
        segs = []
        for ring in getattr(cut.slot.boundary, "geoms", [cut.slot.boundary]):
            c = np.asarray(ring.coords)
            segs.append(np.stack([c[:-1], c[1:]], axis=1))
        self.segments = np.concatenate(segs) if segs else np.zeros((0, 2, 2))
        self.edge_tree = shapely.STRtree(shapely.linestrings(self.segments))
        self.bodies = (("patch", shapely.STRtree(list(cut.patch.geoms))),
                       ("bridge", shapely.STRtree(list(cut.bridge.geoms))))
        corners = _convex_corners(cut.patch)
        self.corner_tree = shapely.STRtree(corners) if len(corners) else None

    def nearest_edges(self, points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per point: distance to the nearest boundary edge and that edge's direction vector."""
        (_, k), dist = self.edge_tree.query_nearest(shapely.points(points), return_distance=True, all_matches=False)
        seg = self.segments[k]
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
        """Per trace band: distance to the nearest convex patch corner (inf without patches)."""
        if self.corner_tree is None:
            return np.full(len(bands), math.inf)
        (_, _), dist = self.corner_tree.query_nearest(bands, return_distance=True, all_matches=False)
        return dist


def _angles(directions: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Angles in degrees (0..90) between trace directions and slot edges where the trace enters or leaves."""
    cos = np.abs(np.einsum("ij,ij->i", directions, edges)) / np.hypot(edges[:, 0], edges[:, 1])
    return np.degrees(np.arccos(np.minimum(1.0, cos)))


def _convex_corners(patch) -> np.ndarray:
    """Convex corners of the patch copper, as shapely points: where a crossing must keep its distance."""
    pts = []
    for poly in getattr(patch, "geoms", [patch]):
        for ring, sign in [(poly.exterior, 1.0)] + [(r, -1.0) for r in poly.interiors]:
            c = np.asarray(ring.coords)[:-1]
            if len(c) < 3:
                continue
            orient = 1.0 if shapely.is_ccw(ring) else -1.0
            prev, nxt = np.roll(c, 1, axis=0), np.roll(c, -1, axis=0)
            cross = (c[:, 0] - prev[:, 0]) * (nxt[:, 1] - c[:, 1]) - (c[:, 1] - prev[:, 1]) * (nxt[:, 0] - c[:, 0])
            convex = cross * orient * sign > 1e-12
            pts.extend(c[convex].tolist())
    return shapely.points(np.asarray(pts)) if pts else np.array([])
