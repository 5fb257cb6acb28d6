"""The pair's centre-line: arc length, straight runs, discretisation and offsets.

A centre-line is a chain of ``Line`` and ``Arc`` pieces (see spec.py).  Cells may
only sit on straight runs; a run loses a margin at each end where the offset
traces are not yet straight (d * tan(turn / 2) for a sharp corner of the
centre-line, since each trace is the centre-line offset by d).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from shapely.geometry import LineString

from .errors import SpecError
from .spec import Arc, Line
from .units import GRID_MM, on_grid

ARC_TOLERANCE_MM = 0.25e-3
"""Largest sagitta between an arc and its chords; well under any fab tolerance."""


@dataclass(frozen=True)
class ArcGeometry:
    centre: tuple[float, float]
    radius: float
    start_angle: float
    sweep: float
    """Signed sweep in radians; positive is counter-clockwise."""


def arc_geometry(arc: Arc) -> ArcGeometry:
    """Centre, radius and signed sweep of the circle through an arc's three points."""
    (ax, ay), (mx, my), (bx, by) = arc.start, arc.mid, arc.end
    d = 2 * (ax * (my - by) + mx * (by - ay) + bx * (ay - my))
    ux = ((ax**2 + ay**2) * (my - by) + (mx**2 + my**2) * (by - ay) + (bx**2 + by**2) * (ay - my)) / d
    uy = ((ax**2 + ay**2) * (bx - mx) + (mx**2 + my**2) * (ax - bx) + (bx**2 + by**2) * (mx - ax)) / d
    radius = math.hypot(ax - ux, ay - uy)
    a0 = math.atan2(ay - uy, ax - ux)
    a1 = math.atan2(by - uy, bx - ux)
    ccw = ((mx - ax) * (by - ay) - (my - ay) * (bx - ax)) > 0
    sweep = (a1 - a0) % (2 * math.pi) if ccw else -((a0 - a1) % (2 * math.pi))
    return ArcGeometry((ux, uy), radius, a0, sweep)


def piece_length(piece: Line | Arc) -> float:
    if isinstance(piece, Line):
        return math.dist(piece.start, piece.end)
    geo = arc_geometry(piece)
    return geo.radius * abs(geo.sweep)


def piece_points(piece: Line | Arc) -> list[tuple[float, float]]:
    """Points of a piece including both ends; arcs are split so the sagitta stays under ARC_TOLERANCE_MM."""
    if isinstance(piece, Line):
        return [piece.start, piece.end]
    geo = arc_geometry(piece)
    step = 2 * math.acos(max(-1.0, 1 - ARC_TOLERANCE_MM / geo.radius)) if geo.radius > ARC_TOLERANCE_MM else math.pi / 2
    n = max(2, math.ceil(abs(geo.sweep) / step)) if step > 0 else 2  # step 0: radius so large the arc is straight
    angles = geo.start_angle + geo.sweep * np.linspace(0.0, 1.0, n + 1)
    pts = [(geo.centre[0] + geo.radius * math.cos(t), geo.centre[1] + geo.radius * math.sin(t)) for t in angles]
    pts[0], pts[-1] = piece.start, piece.end
    return pts


def start_direction(piece: Line | Arc) -> float:
    """Heading in radians where the piece begins."""
    if isinstance(piece, Line):
        return math.atan2(piece.end[1] - piece.start[1], piece.end[0] - piece.start[0])
    geo = arc_geometry(piece)
    return geo.start_angle + math.copysign(math.pi / 2, geo.sweep)


def end_direction(piece: Line | Arc) -> float:
    """Heading in radians where the piece ends."""
    if isinstance(piece, Line):
        return start_direction(piece)
    geo = arc_geometry(piece)
    return geo.start_angle + geo.sweep + math.copysign(math.pi / 2, geo.sweep)


def turn_angle(before: float, after: float) -> float:
    """Signed heading change in (-pi, pi]."""
    turn = (after - before) % (2 * math.pi)
    return turn - 2 * math.pi if turn > math.pi else turn


@dataclass(frozen=True)
class StraightRun:
    """A maximal straight stretch of the centre-line, with the margins its ends lose to bends."""

    s_start: float
    s_end: float
    start: tuple[float, float]
    heading: float
    margin_start: float
    margin_end: float
    first_piece: int
    last_piece: int

    @property
    def length(self) -> float:
        return self.s_end - self.s_start

    @property
    def usable(self) -> tuple[float, float]:
        """Arc-length interval where both offset traces are straight too."""
        return (self.s_start + self.margin_start, self.s_end - self.margin_end)

    def point_at(self, s: float) -> tuple[float, float]:
        t = s - self.s_start
        return (self.start[0] + t * math.cos(self.heading), self.start[1] + t * math.sin(self.heading))


class CentreLine:
    """The pair's centre-line with arc-length bookkeeping."""

    def __init__(self, pieces: tuple[Line | Arc, ...], offset: float):
        self.pieces = pieces
        self.offset = offset
        lengths = [piece_length(p) for p in pieces]
        self.s_starts = np.concatenate([[0.0], np.cumsum(lengths)])
        self.length = float(self.s_starts[-1])

    def linestring(self) -> LineString:
        """Discretised centre-line on the 1 nm grid."""
        return polyline_of(self.pieces)

    def straight_runs(self) -> list[StraightRun]:
        """Maximal straight runs (collinear Line pieces merged) in path order."""
        runs: list[StraightRun] = []
        i, n = 0, len(self.pieces)
        while i < n:
            piece = self.pieces[i]
            if not isinstance(piece, Line):
                i += 1
                continue
            heading = start_direction(piece)
            j = i
            while j + 1 < n and isinstance(self.pieces[j + 1], Line) and abs(turn_angle(heading, start_direction(self.pieces[j + 1]))) < 1e-9:
                j += 1
            before = turn_angle(end_direction(self.pieces[i - 1]), heading) if i > 0 else 0.0
            after = turn_angle(heading, start_direction(self.pieces[j + 1])) if j + 1 < n else 0.0
            runs.append(StraightRun(
                s_start=float(self.s_starts[i]), s_end=float(self.s_starts[j + 1]), start=piece.start, heading=heading,
                margin_start=self.offset * abs(math.tan(before / 2)), margin_end=self.offset * abs(math.tan(after / 2)),
                first_piece=i, last_piece=j,
            ))
            i = j + 1
        return runs

    def sharp_turns(self) -> list[float]:
        """Heading changes at the joints between pieces, in degrees."""
        return [math.degrees(turn_angle(end_direction(a), start_direction(b))) for a, b in zip(self.pieces, self.pieces[1:])]


def polyline_of(pieces: tuple[Line | Arc, ...]) -> LineString:
    pts: list[tuple[float, float]] = []
    for piece in pieces:
        piece_pts = piece_points(piece)
        pts.extend(piece_pts if not pts else piece_pts[1:])
    return on_grid(LineString(pts))


def validate_centre_line(pieces: tuple[Line | Arc, ...], offset: float, width: float) -> CentreLine:
    """Reject centre-lines the pair cannot follow: self-crossing, or bends too sharp for the pair."""
    line = CentreLine(pieces, offset)
    if not line.linestring().is_simple:
        raise SpecError("pair.path", f"{len(pieces)} pieces", "must not cross or touch itself")
    for k, turn in enumerate(line.sharp_turns()):
        if abs(turn) > 135 + 1e-6:
            raise SpecError(f"pair.path[{k + 1}]", f"{turn:.1f} deg turn", "a sharp corner may turn at most 135 degrees")
    for k, piece in enumerate(pieces):
        if isinstance(piece, Arc) and arc_geometry(piece).radius <= offset + width / 2:
            raise SpecError(f"pair.path[{k}]", f"arc radius {arc_geometry(piece).radius:g} mm",
                            f"must exceed the pair's half width ({offset + width / 2:g} mm) so the inner trace can follow it")
    for side in (1.0, -1.0):
        if not offset_pieces(pieces, side * offset).is_simple:
            raise SpecError("pair.path", f"{len(pieces)} pieces", f"bends too tightly for the pair: a trace "
                            f"{offset:g} mm beside it would cross itself (make pieces longer than the pair is wide)")
    return line


def offset_pieces(pieces: tuple[Line | Arc, ...], distance: float) -> LineString:
    """Exact parallel curve at ``distance`` (positive = left of travel), sharp mitred corners.

    Lines shift along their normal, arcs keep their centre and change radius;
    at a sharp joint the two offset pieces are extended to meet (a mitre).
    """
    pts: list[tuple[float, float]] = []
    for k, piece in enumerate(pieces):
        moved = _offset_piece(piece, distance)
        piece_pts = piece_points(moved)
        if pts:
            turn = turn_angle(end_direction(pieces[k - 1]), start_direction(piece))
            if abs(turn) > 1e-9:
                pts[-1] = _meet(pts[-1], end_direction(pieces[k - 1]), piece_pts[0], start_direction(piece))
            piece_pts = piece_pts[1:]
        pts.extend(piece_pts)
    return on_grid(LineString(pts))


def _offset_piece(piece: Line | Arc, distance: float) -> Line | Arc:
    if isinstance(piece, Line):
        h = start_direction(piece)
        nx, ny = -math.sin(h) * distance, math.cos(h) * distance
        return Line((piece.start[0] + nx, piece.start[1] + ny), (piece.end[0] + nx, piece.end[1] + ny))
    geo = arc_geometry(piece)
    radius = geo.radius - distance * math.copysign(1.0, geo.sweep)
    scale = radius / geo.radius
    cx, cy = geo.centre

    def move(p):
        return (cx + (p[0] - cx) * scale, cy + (p[1] - cy) * scale)

    return Arc(move(piece.start), move(piece.mid), move(piece.end))


def _meet(p1, h1: float, p2, h2: float) -> tuple[float, float]:
    """Where the line through p1 heading h1 meets the line through p2 heading h2."""
    d1, d2 = (math.cos(h1), math.sin(h1)), (math.cos(h2), math.sin(h2))
    den = d1[0] * d2[1] - d1[1] * d2[0]
    if abs(den) < 1e-12:
        return p2
    a = ((p2[0] - p1[0]) * d2[1] - (p2[1] - p1[1]) * d2[0]) / den
    return (p1[0] + a * d1[0], p1[1] + a * d1[1])


def to_local(points: np.ndarray, origin: tuple[float, float], heading: float) -> np.ndarray:
    """Board coordinates to (u along heading, v to the left)."""
    c, s = math.cos(heading), math.sin(heading)
    d = np.asarray(points, dtype=float) - origin
    return np.column_stack([d[:, 0] * c + d[:, 1] * s, -d[:, 0] * s + d[:, 1] * c])


def to_board(points: np.ndarray, origin: tuple[float, float], heading: float) -> np.ndarray:
    """(u, v) local coordinates to board coordinates, snapped to the 1 nm grid."""
    c, s = math.cos(heading), math.sin(heading)
    p = np.asarray(points, dtype=float)
    out = np.column_stack([origin[0] + p[:, 0] * c - p[:, 1] * s, origin[1] + p[:, 0] * s + p[:, 1] * c])
    return np.round(out / GRID_MM) * GRID_MM
