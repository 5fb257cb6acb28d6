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
from shapely.geometry import LineString, Point
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
    pieces = sorted(getattr(merged, "geoms", [merged]), key=lambda g: trace_line.project(Point(g.coords[0])))
    pieces = [_oriented(p, trace_line) for p in pieces]

    bodies = _Bodies(cut)
    edges = _Edges(slot.boundary)
    corners = _convex_corners(cut.patch)
    corner_tree = shapely.STRtree(corners) if len(corners) else None
    ends = (Point(trace_line.coords[0]), Point(trace_line.coords[-1]))
    out = []
    for piece in pieces:
        a, b = Point(piece.coords[0]), Point(piece.coords[-1])
        dist_a, edge_a = edges.nearest(a)
        dist_b, edge_b = edges.nearest(b)
        on_a = dist_a < TOUCH_MM and a.distance(ends[0]) > TOUCH_MM
        on_b = dist_b < TOUCH_MM and b.distance(ends[1]) > TOUCH_MM
        body_a, body_b = bodies.at(a, piece, entering=True), bodies.at(b, piece, entering=False)
        if not (on_a and on_b):
            kind = "ends"
        elif body_a != body_b:
            kind = "full"
        else:
            kind = "along"
        angle = min(_angle(piece, edge_a, first=True), _angle(piece, edge_b, first=False))
        mid = piece.interpolate(0.5, normalized=True)
        band = piece.buffer(trace_width / 2, cap_style="flat")
        corner = math.inf
        if corner_tree is not None:
            corner = float(band.distance(corners[int(corner_tree.nearest(band))]))
        out.append(Crossing(
            layer=cut.layer, polarity=polarity, kind=kind, point=(round(mid.x, 6), round(mid.y, 6)),
            s_trace=trace_line.project(mid), s_centre=centre.project(mid), length=piece.length,
            angle_deg=angle, corner_distance=corner, bodies=(body_a, body_b),
        ))
    return out


def _oriented(piece: LineString, trace: LineString) -> LineString:
    """Orient a piece in the trace's direction of travel."""
    if trace.project(Point(piece.coords[0])) > trace.project(Point(piece.coords[-1])):
        return LineString(piece.coords[::-1])
    return piece


class _Bodies:
    """Names the copper body a slot-boundary point belongs to: a patch, a bridge, or the plane."""

    def __init__(self, cut):
        self.patches = shapely.STRtree(list(cut.patch.geoms))
        self.bridges = shapely.STRtree(list(cut.bridge.geoms))

    def at(self, point: Point, piece: LineString, entering: bool) -> str:
        # Step a hair outside the slot, back along the trace, to see which copper it came from / goes to.
        coords = np.asarray(piece.coords)
        direction = coords[1] - coords[0] if entering else coords[-1] - coords[-2]
        direction = direction / (np.linalg.norm(direction) or 1.0)
        probe = Point(np.asarray(point.coords[0]) + (-1 if entering else 1) * 5 * TOUCH_MM * direction)
        for name, tree in (("patch", self.patches), ("bridge", self.bridges)):
            hits = tree.query(probe, predicate="dwithin", distance=TOUCH_MM)
            if len(hits):
                return f"{name}{int(min(hits))}"
        return "plane"


class _Edges:
    """The slot boundary's segments, indexed for the nearest edge to a point."""

    def __init__(self, boundary):
        segs = []
        for ring in getattr(boundary, "geoms", [boundary]):
            c = np.asarray(ring.coords)
            segs.append(np.stack([c[:-1], c[1:]], axis=1))
        self.segments = np.concatenate(segs) if segs else np.zeros((0, 2, 2))
        self.lines = shapely.linestrings(self.segments)
        self.tree = shapely.STRtree(self.lines)

    def nearest(self, point: Point) -> tuple[float, np.ndarray]:
        """(distance, direction vector) of the boundary edge nearest to ``point``."""
        k = int(self.tree.nearest(point))
        seg = self.segments[k]
        return float(point.distance(self.lines[k])), seg[1] - seg[0]


def _angle(piece: LineString, edge: np.ndarray, first: bool) -> float:
    """Angle in degrees (0..90) between the trace and the slot edge where it enters or leaves."""
    c = np.asarray(piece.coords)
    d = c[1] - c[0] if first else c[-1] - c[-2]
    cos = abs(float(np.dot(d, edge))) / (np.linalg.norm(d) * np.linalg.norm(edge))
    return math.degrees(math.acos(min(1.0, cos)))


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
