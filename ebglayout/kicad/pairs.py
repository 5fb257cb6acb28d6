"""Differential pairs on a board: find them by net name, rebuild their centre-line, list them (`ebglayout pairs`).

Centre-line: each net's tracks on a layer are chained into one ordered run of
lines and arcs; pieces of the two traces that run parallel at the pair's pitch
(lines: parallel at a constant distance; arcs: concentric) are paired in order,
and the centre-line takes the midpoint of corresponding vertices.  For a pair
routed as exact offsets of a centre-line (mitred 45-degree chamfers, concentric
arc corners) this is that centre-line again: offsetting it by +-(width +
spacing)/2 gives back both traces.  ``BoardPair.fit_error`` reports how closely
it does; uncoupled lead-ins at the ends are left off.  Chaining and pairing the
tracks is ``pair_runs``; the planes a pair is given come from ``planes``.

Orientation: coordinates stay KiCad's (mm, y down); the engine does not care
which way y points.  The centre-line is directed so that the P trace lies on
the positive-offset side of the engine's math frame, the left of travel when y
points up.  Seen in KiCad, where y points down, P is therefore on the right of
the direction of travel.  The engine's "P on the left" and this reading agree
because both use the same numbers.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Iterable

import numpy as np
import shapely
from shapely.geometry import LineString, Point
from shapely.ops import nearest_points

from ..path import CentreLine, arc_geometry, offset_pieces, piece_length, piece_points, polyline_of
from ..spec import Arc, Line
from .board import Board
from .pair_runs import MATCH_TOLERANCE_MM, Piece, _chains, _net_items, _reverse, _Run, _runs, _wrap
from .planes import board_stackup, nearest_planes, plane_layers_for

SUFFIXES = (("_DP", "_DN"), ("_P", "_N"), ("+", "-"), ("P", "N"))
"""Net-name endings of a pair's positive and negative net, tried in this order (common practice)."""


@dataclass(frozen=True)
class StraightSection:
    """A stretch of the centre-line where both traces are straight: where a filter can sit."""

    start: tuple[float, float]
    end: tuple[float, float]
    length: float


@dataclass(frozen=True)
class BoardPair:
    """One coupled run of a differential pair on one layer, in board coordinates (mm, KiCad's y down)."""

    base: str
    net_p: str
    net_n: str
    layer: str
    width: float
    spacing: float
    length: float
    """Centre-line length of the coupled run."""
    length_p: float
    length_n: float
    """Routed length of each net's tracks on this layer (the whole chain, lead-ins included)."""
    path: tuple[Line | Arc, ...]
    straight_runs: tuple[StraightSection, ...]
    plane_layers: tuple[str, ...]
    plane_net: str
    fit_error: float
    """Largest distance between a trace and the centre-line offset by +-(width + spacing)/2, in mm."""
    warnings: tuple[str, ...] = field(default=())

    @property
    def pitch(self) -> float:
        return self.width + self.spacing

    @property
    def stripline(self) -> bool:
        return len(self.plane_layers) == 2


def pair_nets(names: Iterable[str]) -> list[tuple[str, str, str]]:
    """(base, positive net, negative net) for every pair of nets whose names differ only by a pair suffix."""
    names = list(names)
    present = set(names)
    used: set[str] = set()
    found = []
    for name in sorted(present):
        if name in used:
            continue
        for sp, sn in SUFFIXES:
            for p_end, n_end in ((sp, sn), (sp.lower(), sn.lower())):
                if name.endswith(p_end) and len(name) > len(p_end):
                    partner = name[:-len(p_end)] + n_end
                    if partner in present and partner not in used:
                        found.append((name[:-len(p_end)], name, partner))
                        used.update((name, partner))
                        break
            if name in used:
                break
    return sorted(found)


def find_pairs(board: Board, plane_net: str = "GND", max_gap: float = 1.0, min_length: float = 1.0,
               only: str | Iterable[str] | None = None) -> list[BoardPair]:
    """Every coupled run of every pair found by net name, on every layer, sorted by name, layer and position.

    ``max_gap`` bounds the edge-to-edge gap of a coupled run (common practice:
    pair gaps are of the order of the trace width, well under a millimetre);
    runs shorter than ``min_length`` (mm of overlap) are dropped: no filter cell fits there.
    ``only`` keeps the pairs whose base name or one of whose nets is that name (or one of those names).
    Pairs are chosen by name before any geometry is read, and each pair's tracks are
    looked up by net, so the rest of the board costs nothing here.
    """
    wanted = None if only is None else {only} if isinstance(only, str) else set(only)
    pairs: list[BoardPair] = []
    for base, net_p, net_n in pair_nets(board.nets):
        if wanted is not None and not wanted & {base, net_p, net_n}:
            continue
        p_items = _net_items(board, board.net_index(net_p))
        n_items = _net_items(board, board.net_index(net_n))
        for li, layer in enumerate(board.copper_layers):
            p_pieces, n_pieces = p_items.get(li, []), n_items.get(li, [])
            if not p_pieces or not n_pieces:
                continue
            p_chains, n_chains = _chains(p_pieces), _chains(n_pieces)
            length_p = sum(piece_length(p) for p, _ in p_pieces)
            length_n = sum(piece_length(p) for p, _ in n_pieces)
            for run in _runs(p_chains, n_chains, max_gap, min_length):
                pairs.append(_board_pair(board, base, net_p, net_n, layer, run, length_p, length_n, plane_net))
    return sorted(pairs, key=lambda bp: (bp.base, board.copper_layers.index(bp.layer), bp.path[0].start))


def pair_table(board: Board, min_run: float = 2.0) -> list[dict]:
    """`ebglayout pairs`: every pair found, with the straight runs long enough for a filter.

    ``planes`` are the pair's nearest planes of the GND net, ``references`` its
    nearest planes of any net (the return path; `place` cuts only those), and
    ``stackup`` the stack-up keys `place` takes from the board for a filter in
    the references (``planes.board_stackup``), without "stackup.".
    """
    rows = []
    for bp in find_pairs(board):
        runs = [r for r in bp.straight_runs if r.length >= min_run]
        region = polyline_of(bp.path)
        references = nearest_planes(board, bp.layer, region)
        rows.append({
            "pair": bp.base, "nets": [bp.net_p, bp.net_n], "layer": bp.layer,
            "width": round(bp.width, 6), "spacing": round(bp.spacing, 6),
            "length": round(bp.length, 4), "length_p": round(bp.length_p, 4), "length_n": round(bp.length_n, 4),
            "planes": list(bp.plane_layers),
            "references": references,
            "stackup": {key: [round(v, 6) for v in value] if isinstance(value, list) else round(value, 6)
                        for key, value in board_stackup(board, bp.layer, references, region).items()},
            "straight_runs": [{"start": [round(r.start[0], 4), round(r.start[1], 4)],
                               "end": [round(r.end[0], 4), round(r.end[1], 4)], "length": round(r.length, 4)}
                              for r in runs],
            "warnings": list(bp.warnings),
        })
    return rows


# ---- centre-line ----

def _centre_pieces(run: _Run) -> tuple[Piece, ...]:
    """Midpoint centre-line of a run; its ends clipped to where both traces are present."""
    n = len(run.p)
    verts: list[tuple[float, float]] = [(0.0, 0.0)] * (n + 1)
    for t in range(1, n):
        a, b = run.p[t][0].start, run.n[t][0].start
        verts[t] = ((a[0] + b[0]) / 2, (a[1] + b[1]) / 2)
    verts[0] = _clipped_end(run.p[0][0], run.n[0][0], at_start=True)
    verts[n] = _clipped_end(run.p[-1][0], run.n[-1][0], at_start=False)
    pieces: list[Piece] = []
    for t in range(n):
        p, q = run.p[t][0], run.n[t][0]
        a, b = verts[t], verts[t + 1]
        if isinstance(p, Line):
            pieces.append(Line(a, b))
            continue
        gp, gq = arc_geometry(p), arc_geometry(q)
        cx, cy = (gp.centre[0] + gq.centre[0]) / 2, (gp.centre[1] + gq.centre[1]) / 2
        r = (gp.radius + gq.radius) / 2
        ta, tb = math.atan2(a[1] - cy, a[0] - cx), math.atan2(b[1] - cy, b[0] - cx)
        sign = math.copysign(1.0, gp.sweep)
        sweep = sign * ((sign * (tb - ta)) % (2 * math.pi))
        tm = ta + sweep / 2
        pieces.append(Arc(a, (cx + r * math.cos(tm), cy + r * math.sin(tm)), b))
    return tuple(pieces)


def _clipped_end(p: Piece, q: Piece, at_start: bool) -> tuple[float, float]:
    """Centre-line end point where the later-starting (or earlier-ending) of the two traces begins (ends)."""
    if isinstance(p, Line):
        ux, uy = p.end[0] - p.start[0], p.end[1] - p.start[1]
        length = math.hypot(ux, uy)
        ux, uy = ux / length, uy / length
        foot_s = (p.start[0] - q.start[0]) * ux + (p.start[1] - q.start[1]) * uy
        foot = (q.start[0] + foot_s * ux, q.start[1] + foot_s * uy)
        base = ((p.start[0] + foot[0]) / 2, (p.start[1] + foot[1]) / 2)
        q_s0 = (q.start[0] - p.start[0]) * ux + (q.start[1] - p.start[1]) * uy
        q_s1 = (q.end[0] - p.start[0]) * ux + (q.end[1] - p.start[1]) * uy
        s = max(0.0, q_s0) if at_start else min(length, q_s1)
        return (base[0] + s * ux, base[1] + s * uy)
    gp, gq = arc_geometry(p), arc_geometry(q)
    cx, cy = (gp.centre[0] + gq.centre[0]) / 2, (gp.centre[1] + gq.centre[1]) / 2
    r = (gp.radius + gq.radius) / 2
    sign = math.copysign(1.0, gp.sweep)
    if at_start:
        offset = sign * _wrap(gq.start_angle - gp.start_angle)
        t = gp.start_angle + sign * max(0.0, offset)
    else:
        p_end, q_end = gp.start_angle + gp.sweep, gq.start_angle + gq.sweep
        offset = sign * _wrap(q_end - p_end)
        t = p_end + sign * min(0.0, offset)
    return (cx + r * math.cos(t), cy + r * math.sin(t))


def _reverse_path(pieces: tuple[Piece, ...]) -> tuple[Piece, ...]:
    return tuple(_reverse(p) for p in reversed(pieces))


def _fit_error(path: tuple[Piece, ...], run: _Run, offset: float) -> float:
    """Largest gap between each trace and the centre-line offset towards it (both directions measured)."""
    worst = 0.0
    for pieces, sign in ((run.p, 1.0), (run.n, -1.0)):
        offset_line = offset_pieces(path, sign * offset)
        trace = LineString(_points([p for p, _ in pieces]))
        samples = shapely.line_interpolate_point(offset_line, np.linspace(0, offset_line.length, 200))
        inner = shapely.points(np.array([p.start for p, _ in pieces[1:]]).reshape(-1, 2))
        worst = max(worst, float(shapely.distance(samples, trace).max()),
                    float(shapely.distance(inner, offset_line).max()) if len(pieces) > 1 else 0.0)
    return worst


def _points(pieces: list[Piece]) -> list[tuple[float, float]]:
    pts: list[tuple[float, float]] = []
    for piece in pieces:
        more = piece_points(piece)
        pts.extend(more if not pts else more[1:])
    return pts


def _board_pair(board: Board, base: str, net_p: str, net_n: str, layer: str, run: _Run, length_p: float,
                length_n: float, plane_net: str) -> BoardPair:
    notes: list[str] = []
    wp = _weighted_mode([w for _, w in run.p], [piece_length(p) for p, _ in run.p])
    wn = _weighted_mode([w for _, w in run.n], [piece_length(p) for p, _ in run.n])
    if len({w for _, w in run.p} | {w for _, w in run.n}) > 1:
        notes.append(f"trace widths vary along the run ({wp:g} / {wn:g} mm most used); the engine uses one width")
    pitch = _weighted_median(run.separations, run.overlaps)
    width = (wp + wn) / 2
    path = _centre_pieces(run)
    tangent, mid = _tangent_mid(path[len(path) // 2])
    near = nearest_points(LineString(_points([p for p, _ in run.p])), Point(mid))[0]
    if tangent[0] * (near.y - mid[1]) - tangent[1] * (near.x - mid[0]) < 0:
        path = _reverse_path(path)
    fit = _fit_error(path, run, pitch / 2)
    if fit > MATCH_TOLERANCE_MM:
        notes.append(f"the traces are not exact offsets of one centre-line: off by up to {fit * 1000:.1f} um")
    centre = CentreLine(path, pitch / 2)
    straights = []
    for r in centre.straight_runs():
        s0, s1 = r.usable
        if s1 - s0 > 1e-6:
            straights.append(StraightSection(r.point_at(s0), r.point_at(s1), s1 - s0))
    region = polyline_of(path)
    planes, more = plane_layers_for(board, layer, plane_net, region)
    notes += more
    return BoardPair(
        base=base, net_p=net_p, net_n=net_n, layer=layer, width=width, spacing=pitch - width, length=centre.length,
        length_p=length_p, length_n=length_n, path=path, straight_runs=tuple(straights), plane_layers=planes,
        plane_net=plane_net, fit_error=fit, warnings=tuple(notes),
    )


def _weighted_median(values: list[float], weights: list[float]) -> float:
    """The value at half the total weight (pieces weighted by how long they run side by side)."""
    order = np.argsort(values)
    cumulative = np.cumsum(np.asarray(weights)[order])
    return float(np.asarray(values)[order][int(np.searchsorted(cumulative, cumulative[-1] / 2))])


def _weighted_mode(values: list[float], weights: list[float]) -> float:
    totals: dict[float, float] = {}
    for v, w in zip(values, weights):
        totals[v] = totals.get(v, 0.0) + w
    return max(sorted(totals), key=lambda v: totals[v])


def _tangent_mid(piece: Piece) -> tuple[tuple[float, float], tuple[float, float]]:
    if isinstance(piece, Line):
        dx, dy = piece.end[0] - piece.start[0], piece.end[1] - piece.start[1]
        length = math.hypot(dx, dy)
        return (dx / length, dy / length), ((piece.start[0] + piece.end[0]) / 2, (piece.start[1] + piece.end[1]) / 2)
    geo = arc_geometry(piece)
    t = geo.start_angle + geo.sweep / 2
    sign = math.copysign(1.0, geo.sweep)
    return (-math.sin(t) * sign, math.cos(t) * sign), (geo.centre[0] + geo.radius * math.cos(t),
                                                         geo.centre[1] + geo.radius * math.sin(t))
