"""Differential pairs on a board: find them by net name, rebuild their centre-line, hand them to the engine.

Centre-line: each net's tracks on a layer are chained into one ordered run of
lines and arcs; pieces of the two traces that run parallel at the pair's pitch
(lines: parallel at a constant distance; arcs: concentric) are paired in order,
and the centre-line takes the midpoint of corresponding vertices.  For a pair
routed as exact offsets of a centre-line (mitred 45-degree chamfers, concentric
arc corners) this is that centre-line again: offsetting it by +-(width +
spacing)/2 gives back both traces.  ``BoardPair.fit_error`` reports how closely
it does; uncoupled lead-ins at the ends are left off.

Orientation: coordinates stay KiCad's (mm, y down); the engine does not care
which way y points.  The centre-line is directed so that the P trace lies on
the positive-offset side of the engine's math frame, the left of travel when y
points up.  Seen in KiCad, where y points down, P is therefore on the right of
the direction of travel.  The engine's "P on the left" and this reading agree
because both use the same numbers.
"""
from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from typing import Iterable

import numpy as np
import shapely
from shapely.geometry import LineString, MultiPolygon, Point
from shapely.ops import nearest_points

from ..errors import SpecError
from ..path import CentreLine, arc_geometry, offset_pieces, piece_length, piece_points, polyline_of
from ..spec import Arc, Line, TrackObstacle, ViaObstacle
from ..units import parse_length
from .board import Board

SUFFIXES = (("_DP", "_DN"), ("_P", "_N"), ("+", "-"), ("P", "N"))
"""Net-name endings of a pair's positive and negative net, tried in this order (common practice)."""
MATCH_TOLERANCE_MM = 1e-3
"""Two pieces are partners when their distance stays within this of the pair's pitch (1 um)."""
JOIN_TOLERANCE_MM = 1e-4
"""Track ends closer than this are one node of a chain (KiCad writes exact 1 nm coordinates)."""


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


# ---- chaining ----

Piece = Line | Arc


def _net_items(board: Board, net: int | None) -> dict[int, list]:
    """A net's tracks as (piece, width), per copper-layer index."""
    out: dict[int, list[tuple[Piece, float]]] = {}
    if net is None:
        return out
    seg, arc = board.segments, board.arcs
    for k in board.net_rows("segments", net).tolist():
        a, b = tuple(seg.start[k].tolist()), tuple(seg.end[k].tolist())
        if math.dist(a, b) > 1e-9:
            out.setdefault(int(seg.layer[k]), []).append((Line(a, b), float(seg.width[k])))
    for k in board.net_rows("arcs", net).tolist():
        a, m, b = (tuple(v[k].tolist()) for v in (arc.start, arc.mid, arc.end))
        cross = (m[0] - a[0]) * (b[1] - a[1]) - (m[1] - a[1]) * (b[0] - a[0])
        piece = Arc(a, m, b) if abs(cross) > 1e-12 else Line(a, b)
        out.setdefault(int(arc.layer[k]), []).append((piece, float(arc.width[k])))
    return out


def _reverse(piece: Piece) -> Piece:
    return Line(piece.end, piece.start) if isinstance(piece, Line) else Arc(piece.end, piece.mid, piece.start)


def _chains(pieces: list[tuple[Piece, float]]) -> list[list[tuple[Piece, float]]]:
    """Order connected pieces into chains, splitting at branches; collinear lines and co-circular arcs merged."""
    ends = np.array([[p.start, p.end] for p, _ in pieces], dtype=float).reshape(-1, 2)
    node = np.arange(len(ends))
    for i, j in _close_pairs(ends, JOIN_TOLERANCE_MM):
        a, b = _root(node, i), _root(node, j)
        node[max(a, b)] = min(a, b)
    node = np.array([_root(node, i) for i in range(len(ends))])
    incident: dict[int, list[int]] = {}
    for k, n in enumerate(node.tolist()):
        incident.setdefault(n, []).append(k)
    visited = [False] * len(pieces)
    chains = []

    def walk(end_index: int) -> list[tuple[Piece, float]]:
        chain = []
        k = end_index
        while True:
            piece_index, side = divmod(k, 2)
            if visited[piece_index]:
                break
            visited[piece_index] = True
            piece, width = pieces[piece_index]
            chain.append((piece if side == 0 else _reverse(piece), width))
            far = node[2 * piece_index + (1 - side)]
            nxt = [e for e in incident[far] if not visited[e // 2]]
            if len(incident[far]) != 2 or not nxt:
                break
            k = nxt[0]
        return chain

    for _, ks in sorted(incident.items()):
        if len(ks) != 2:
            for k in ks:
                if not visited[k // 2]:
                    chains.append(walk(k))
    for i in range(len(pieces)):
        if not visited[i]:
            chains.append(walk(2 * i))
    return [_merge(c) for c in chains if c]


def _close_pairs(points: np.ndarray, tolerance: float) -> list[tuple[int, int]]:
    """Index pairs (i < j) of points within ``tolerance`` of each other, sorted: a sweep along x in numpy."""
    order = np.argsort(points[:, 0], kind="stable")
    xs = points[order, 0]
    reach = np.searchsorted(xs, xs + tolerance, side="right") - np.arange(len(xs))
    found = []
    for step in range(1, int(reach.max(initial=1))):
        first = np.flatnonzero(reach > step)
        a, b = order[first], order[first + step]
        near = np.hypot(*(points[a] - points[b]).T) <= tolerance
        found.append(np.sort(np.stack([a[near], b[near]], axis=1), axis=1))
    if not found:
        return []
    return sorted(map(tuple, np.concatenate(found).tolist()))


def _root(parent: np.ndarray, i: int) -> int:
    while parent[i] != i:
        i = parent[i]
    return i


def _merge(chain: list[tuple[Piece, float]]) -> list[tuple[Piece, float]]:
    out: list[tuple[Piece, float]] = []
    for piece, width in chain:
        if out and out[-1][1] == width:
            prev = out[-1][0]
            if isinstance(prev, Line) and isinstance(piece, Line) and _collinear(prev.start, prev.end, piece.end):
                out[-1] = (Line(prev.start, piece.end), width)
                continue
            if isinstance(prev, Arc) and isinstance(piece, Arc):
                merged = _merge_arcs(prev, piece)
                if merged is not None:
                    out[-1] = (merged, width)
                    continue
        out.append((piece, width))
    return out


def _collinear(a, b, c, tol: float = 1e-5) -> bool:
    ab = (b[0] - a[0], b[1] - a[1])
    bc = (c[0] - b[0], c[1] - b[1])
    ac = math.hypot(c[0] - a[0], c[1] - a[1])
    if ac < 1e-9 or ab[0] * bc[0] + ab[1] * bc[1] <= 0:
        return False
    return abs((b[0] - a[0]) * (c[1] - a[1]) - (b[1] - a[1]) * (c[0] - a[0])) / ac < tol


def _merge_arcs(a: Arc, b: Arc) -> Arc | None:
    ga, gb = arc_geometry(a), arc_geometry(b)
    if (math.dist(ga.centre, gb.centre) > JOIN_TOLERANCE_MM or abs(ga.radius - gb.radius) > JOIN_TOLERANCE_MM
            or ga.sweep * gb.sweep <= 0 or abs(ga.sweep + gb.sweep) >= 2 * math.pi - 1e-6):
        return None
    t = ga.start_angle + (ga.sweep + gb.sweep) / 2
    return Arc(a.start, (ga.centre[0] + ga.radius * math.cos(t), ga.centre[1] + ga.radius * math.sin(t)), b.end)


# ---- pairing pieces of the two traces ----

@dataclass
class _Run:
    p: list[tuple[Piece, float]]
    n: list[tuple[Piece, float]]
    separations: list[float]
    overlaps: list[float]


def _partner(p: Piece, n: Piece) -> tuple[float, float] | None:
    """(centre distance, overlap length) when two pieces run side by side in the same direction, else None."""
    if isinstance(p, Line) and isinstance(n, Line):
        ux, uy = p.end[0] - p.start[0], p.end[1] - p.start[1]
        length = math.hypot(ux, uy)
        ux, uy = ux / length, uy / length
        d0 = ux * (n.start[1] - p.start[1]) - uy * (n.start[0] - p.start[0])
        d1 = ux * (n.end[1] - p.start[1]) - uy * (n.end[0] - p.start[0])
        s0 = (n.start[0] - p.start[0]) * ux + (n.start[1] - p.start[1]) * uy
        s1 = (n.end[0] - p.start[0]) * ux + (n.end[1] - p.start[1]) * uy
        if s1 <= s0 or abs(d1 - d0) > MATCH_TOLERANCE_MM or d0 * d1 <= 0:
            return None
        overlap = min(length, s1) - max(0.0, s0)
        return (abs(d0 + d1) / 2, overlap) if overlap > 1e-6 else None
    if isinstance(p, Arc) and isinstance(n, Arc):
        gp, gn = arc_geometry(p), arc_geometry(n)
        if math.dist(gp.centre, gn.centre) > MATCH_TOLERANCE_MM or gp.sweep * gn.sweep <= 0:
            return None
        sign = math.copysign(1.0, gp.sweep)
        start = sign * _wrap(gn.start_angle - gp.start_angle)
        lo, hi = max(0.0, start), min(abs(gp.sweep), start + abs(gn.sweep))
        overlap = (hi - lo) * (gp.radius + gn.radius) / 2
        return (abs(gp.radius - gn.radius), overlap) if overlap > 1e-6 else None
    return None


def _wrap(angle: float) -> float:
    return (angle + math.pi) % (2 * math.pi) - math.pi


def _boxes(chain: list[tuple[Piece, float]]) -> np.ndarray:
    """(n, 4) bounding boxes of a chain's pieces (arcs by their three points and their circle's reach)."""
    ends = np.array([(piece.start, piece.end) for piece, _ in chain], dtype=float).reshape(-1, 2, 2)
    out = np.hstack([ends.min(axis=1), ends.max(axis=1)])
    for i, (piece, _) in enumerate(chain):
        if isinstance(piece, Arc):
            geo = arc_geometry(piece)
            lo = np.minimum(out[i, :2], piece.mid)
            hi = np.maximum(out[i, 2:], piece.mid)
            out[i] = [max(lo[0] - geo.radius, geo.centre[0] - geo.radius),
                      max(lo[1] - geo.radius, geo.centre[1] - geo.radius),
                      min(hi[0] + geo.radius, geo.centre[0] + geo.radius),
                      min(hi[1] + geo.radius, geo.centre[1] + geo.radius)]
    return out


def _piece_table(chains) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Start (n, 2), end (n, 2), width and is-a-line flag of every piece of the chains, in chain order."""
    pieces = [(piece, w) for chain in chains for piece, w in chain]
    start = np.array([p.start for p, _ in pieces], dtype=float).reshape(-1, 2)
    end = np.array([p.end for p, _ in pieces], dtype=float).reshape(-1, 2)
    return start, end, np.array([w for _, w in pieces]), np.array([isinstance(p, Line) for p, _ in pieces])


def _may_partner(p_table, n_table, hits: np.ndarray, max_gap: float) -> np.ndarray:
    """False where two candidate pieces cannot be partners in either direction (numpy form of ``_partner``).

    Lines: the same tests as ``_partner`` plus the pitch window, each loosened by
    1e-9 mm so rounding never drops a true partner; the exact test still decides.
    A line and an arc are never partners; two arcs are left to the exact test.
    """
    (ps, pe, pw, p_line), (qs, qe, qw, q_line) = p_table, n_table
    a, b = hits
    ps, pe, qs, qe = ps[a], pe[a], qs[b], qe[b]
    u = pe - ps
    length = np.hypot(u[:, 0], u[:, 1])
    u = u / np.where(length > 0, length, 1.0)[:, None]
    d0 = u[:, 0] * (qs[:, 1] - ps[:, 1]) - u[:, 1] * (qs[:, 0] - ps[:, 0])
    d1 = u[:, 0] * (qe[:, 1] - ps[:, 1]) - u[:, 1] * (qe[:, 0] - ps[:, 0])
    s0 = (qs[:, 0] - ps[:, 0]) * u[:, 0] + (qs[:, 1] - ps[:, 1]) * u[:, 1]
    s1 = (qe[:, 0] - ps[:, 0]) * u[:, 0] + (qe[:, 1] - ps[:, 1]) * u[:, 1]
    overlap = np.minimum(length, np.maximum(s0, s1)) - np.maximum(0.0, np.minimum(s0, s1))
    separation = np.abs(d0 + d1) / 2
    half = (pw[a] + qw[b]) / 2
    eps = 1e-9
    lines = ((np.abs(d1 - d0) <= MATCH_TOLERANCE_MM + eps) & (d0 * d1 > -eps) & (overlap > 1e-6 - eps)
             & (separation > half - eps) & (separation <= half + max_gap + eps))
    both_lines, both_arcs = p_line[a] & q_line[b], ~p_line[a] & ~q_line[b]
    return (both_lines & lines) | both_arcs


def _runs(p_chains, n_chains, max_gap: float, min_length: float) -> list[_Run]:
    """Maximal runs of consecutive partner pieces at one pitch, best first, not sharing pieces.

    A bounding-box join of all P pieces against all N pieces (shapely's STRtree,
    in C) leaves only pieces within reach of each other; of those, line pairs
    that fail the partner test in both directions are dropped with numpy
    (``_may_partner``), so only near-parallel neighbours reach the exact test.
    """
    p_owner = [(c, i) for c, chain in enumerate(p_chains) for i in range(len(chain))]
    n_owner = [(c, k) for c, chain in enumerate(n_chains) for k in range(len(chain))]
    p_box = np.vstack([_boxes(c) for c in p_chains])
    n_box = np.vstack([_boxes(c) for c in n_chains])
    reach = max(w for c in p_chains for _, w in c) + max(w for c in n_chains for _, w in c) + max_gap
    tree = shapely.STRtree(shapely.box(*n_box.T))
    hits = tree.query(shapely.box(*(p_box + [-reach, -reach, reach, reach]).T), predicate="intersects")
    hits = hits[:, _may_partner(_piece_table(p_chains), _piece_table(n_chains), hits, max_gap)]
    groups: dict[tuple[int, int], list[tuple[int, int]]] = {}
    for a, b in hits.T.tolist():
        (pc, i), (nc, k) = p_owner[a], n_owner[b]
        groups.setdefault((pc, nc), []).append((i, k))
    candidates = []
    for (pc, nc), pairs_near in sorted(groups.items()):
        p_chain, n_chain = p_chains[pc], n_chains[nc]
        last = len(n_chain) - 1
        for flipped in (False, True):
            n_seq = [(_reverse(q), w) for q, w in reversed(n_chain)] if flipped else n_chain
            table = {}
            for i, k0 in pairs_near:
                k = last - k0 if flipped else k0
                (p, wp), (q, wq) = p_chain[i], n_seq[k]
                hit = _partner(p, q)
                if hit is not None and (wp + wq) / 2 < hit[0] <= (wp + wq) / 2 + max_gap:
                    table[i, k] = hit
            for (i, k), (sep, _) in sorted(table.items()):
                prev = table.get((i - 1, k - 1))
                if prev is not None and abs(prev[0] - sep) <= MATCH_TOLERANCE_MM:
                    continue
                t = 0
                while abs(table.get((i + t + 1, k + t + 1), (math.inf,))[0] - sep) <= MATCH_TOLERANCE_MM:
                    t += 1
                found = [table[i + s, k + s] for s in range(t + 1)]
                idx_n = [(nc, (last - (k + s)) if flipped else k + s) for s in range(t + 1)]
                candidates.append((sum(h[1] for h in found), pc, list(range(i, i + t + 1)), idx_n,
                                   _Run(p_chain[i:i + t + 1], n_seq[k:k + t + 1], [h[0] for h in found],
                                        [h[1] for h in found])))
    candidates = [c for c in candidates if c[0] >= min_length]
    candidates.sort(key=lambda c: (-c[0], c[1], c[2]))
    taken_p, taken_n, runs = set(), set(), []
    for _, pc, ps, ns, run in candidates:
        keys_p = {(pc, i) for i in ps}
        if keys_p & taken_p or set(ns) & taken_n:
            continue
        taken_p |= keys_p
        taken_n |= set(ns)
        runs.append(run)
    return runs


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


# ---- planes and stack-up ----

def _plane_zones(board: Board, layer: str, net: str | None, region) -> list:
    return [z for z in board.zones if not z.is_rule_area and layer in z.layers and (net is None or z.net_name == net)
            and (region is None or z.outline.intersects(region))]


def plane_layers_for(board: Board, layer: str, plane_net: str | None = "GND",
                     region=None) -> tuple[tuple[str, ...], list[str]]:
    """Nearest copper layer above and below ``layer`` holding a zone of ``plane_net`` (under ``region`` if given).

    ``plane_net`` None accepts a copper zone of any net.  Returns the layers
    (one: microstrip, two: stripline) and notes, e.g. when a zone of another net
    lies between the pair and the plane found.
    """
    order = board.copper_layers
    i = order.index(layer)
    found, notes = [], []
    for side in (order[:i][::-1], order[i + 1:]):
        for other in side:
            if _plane_zones(board, other, plane_net, region):
                found.append(other)
                break
            foreign = _plane_zones(board, other, None, region)
            if foreign:
                nets = ", ".join(sorted({z.net_name or "(no net)" for z in foreign}))
                notes.append(f"{other} carries zone(s) of {nets} between {layer} and the {plane_net} plane")
    if not found:
        notes.append(f"no {plane_net or 'copper'} zone on any copper layer next to {layer}"
                     + (" under the pair" if region is not None else ""))
    return tuple(sorted(found, key=order.index)), notes


def reference_layers(board: Board, plane_net: str = "GND") -> dict[str, tuple[str, ...]]:
    """For every copper layer, the nearest layers above and below with a zone of ``plane_net`` (board-wide)."""
    return {layer: plane_layers_for(board, layer, plane_net)[0] for layer in board.copper_layers}


def _nearest_plane(board: Board, layer: str, side: int, region) -> str | None:
    """The first copper layer above (side -1) or below (+1) ``layer`` with a copper zone of any net under ``region``."""
    order = board.copper_layers
    i = order.index(layer)
    for other in (order[:i][::-1] if side < 0 else order[i + 1:]):
        if _plane_zones(board, other, None, region):
            return other
    return None


def _zone_nets(board: Board, layer: str, region) -> str:
    return ", ".join(sorted({z.net_name or "(no net)" for z in _plane_zones(board, layer, None, region)})) or "no plane"


def nearest_planes(board: Board, layer: str, region) -> list[str]:
    """The nearest copper-zone layer (any net) above and below ``layer`` under ``region``: its reference planes."""
    return [r for r in (_nearest_plane(board, layer, side, region) for side in (-1, 1)) if r]


def board_layer_map(board: Board, layer: str, region) -> str:
    """The board's copper layers top to bottom with the nets of their zones under ``region``, and the references."""
    layers = ", ".join(f"{o} ({'the pair' if o == layer else _zone_nets(board, o, region)})"
                       for o in board.copper_layers)
    refs = nearest_planes(board, layer, region)
    implied = " and ".join(f"{r} ({_zone_nets(board, r, region)})" for r in refs) or "none"
    return f"{board.name} copper under the pair: {layers}; the pair's reference planes there: {implied}"


def verify_plane_layers(board: Board, pair: BoardPair, layers: list[str], net: str, given: bool) -> None:
    """Refuse plane layers that are not the pair's reference planes on this board (raises SpecError).

    Each layer must exist, carry a zone of ``net`` under the pair, and be the
    nearest copper-zone layer on its side of the pair (the return current runs
    on the nearest plane of any net); two layers must lie on opposite sides, and
    a pair with a plane on both sides (stripline) needs both.
    """
    order, region = board.copper_layers, polyline_of(pair.path)
    value = list(layers) if given else f"{list(layers)} (found on the board)"

    def refuse(why: str) -> None:
        raise SpecError("plane.layers", value, f"{why}; {board_layer_map(board, pair.layer, region)}")

    for layer in layers:
        if layer not in order:
            refuse(f"{layer} is not a copper layer of {board.name}")
        if layer == pair.layer:
            refuse(f"{layer} is the layer {pair.base} is routed on")
    sides = [1 if order.index(layer) > order.index(pair.layer) else -1 for layer in layers]
    if len(layers) == 2 and sides[0] == sides[1]:
        refuse(f"both planes lie {'below' if sides[0] > 0 else 'above'} {pair.layer}; a stripline cut goes into the "
               "plane above and the plane below the pair")
    for layer, side in zip(layers, sides):
        if not _plane_zones(board, layer, net, region):
            refuse(f"{layer} carries no {net} zone under {pair.base} (it has: {_zone_nets(board, layer, region)})")
        nearest = _nearest_plane(board, pair.layer, side, region)
        if nearest != layer:
            refuse(f"{nearest} ({_zone_nets(board, nearest, region)}) lies between {pair.layer} and {layer}, so the "
                   f"pair's return current runs on {nearest}, not on the {net} plane of {layer}")
    if len(layers) == 1:
        other = _nearest_plane(board, pair.layer, -sides[0], region)
        if other is not None:
            refuse(f"{pair.base} is stripline between {layers[0]} and {other}: cut both planes")


STACKUP_AGREEMENT = 0.01
"""Relative difference within which a spec's stack-up value agrees with the board's (1 %: stack-up tables are
rounded to two or three digits)."""


def board_stackup(board: Board, pair_layer: str, plane_layers: list[str], region) -> dict[str, float | list[float]]:
    """The stack-up keys (without "stackup.") the board's stack-up gives for a pair and its cut planes.

    er, h: the cavity under the first cut plane, towards the nearest copper layer
    beyond it with a zone under the pair (else the next copper layer).  pair_h: per
    cut plane, pair layer to plane.  pair_er: the series value of the dielectrics
    between the pair and its plane (stripline: between the two planes).  tan_d:
    the series value over every dielectric from the outermost cavity to the pair.
    A key is left out where the stack-up lacks the values.
    """
    if board.stackup is None or not plane_layers:
        return {}
    stack, order = board.stackup, board.copper_layers
    found: dict[str, float | list[float]] = {}
    cavities = _cavities(board, pair_layer, plane_layers, region)
    h, er = cavities[0][2:]
    if h is not None and er is not None:
        found.update(er=er, h=h)
    heights = [stack.between(pair_layer, plane)[0] for plane in plane_layers]
    if all(h is not None for h in heights):
        found["pair_h"] = heights
    ends = plane_layers if len(plane_layers) == 2 else [pair_layer, plane_layers[0]]
    pair_er = stack.between(*ends)[1]
    if pair_er is not None:
        found["pair_er"] = pair_er
    span = [order.index(layer) for _, target, _, _ in cavities for layer in (pair_layer, target)]
    tan_d = stack.loss_tangent(order[min(span)], order[max(span)])
    if tan_d is not None:
        found["tan_d"] = tan_d
    return found


def _cavities(board: Board, pair_layer: str, plane_layers: list[str], region) -> list[tuple[str, str, float | None,
                                                                                          float | None]]:
    """(plane, far layer, h, er) of the cavity beyond each cut plane, away from the pair (``board_stackup``)."""
    order, out = board.copper_layers, []
    for plane in plane_layers:
        i, j = order.index(plane), order.index(pair_layer)
        beyond = order[:i][::-1] if i < j else order[i + 1:]
        target = next((o for o in beyond if _plane_zones(board, o, None, region)), beyond[0] if beyond else pair_layer)
        out.append((plane, target, *board.stackup.between(plane, target)))
    return out


def stackup_notes(board: Board, pair_layer: str, plane_layers: list[str], region) -> list[str]:
    """Where the board's stack-up has more to say than one cavity value can carry (two different stripline cavities)."""
    if board.stackup is None or len(plane_layers) < 2:
        return []
    (plane, far, h, er), *others = _cavities(board, pair_layer, plane_layers, region)
    return [f"the cavity beyond {o_plane} (to {o_far}: {o_h:g} mm, er {o_er:g}) differs from the one beyond {plane} "
            f"(to {far}: {h:g} mm, er {er:g}) that stackup.er and stackup.h describe"
            for o_plane, o_far, o_h, o_er in others
            if None not in (h, er, o_h, o_er) and not (math.isclose(h, o_h, rel_tol=STACKUP_AGREEMENT)
                                                    and math.isclose(er, o_er, rel_tol=STACKUP_AGREEMENT))]


def cavity(board: Board, pair: BoardPair) -> tuple[float, float] | None:
    """(h, er) of the dielectric under the pair's first cut plane (``board_stackup``), None if the board lacks them."""
    found = board_stackup(board, pair.layer, list(pair.plane_layers), polyline_of(pair.path))
    return (found["h"], found["er"]) if "h" in found else None


def _agrees(spec_value, board_value, units: str | None) -> bool:
    """A spec's stack-up value (a length in the file's ``units``, or a number when None) against the board's."""
    if isinstance(board_value, list):
        given = spec_value if isinstance(spec_value, list) else [spec_value] * len(board_value)
        return len(given) == len(board_value) and all(_agrees(a, b, units) for a, b in zip(given, board_value))
    try:
        value = parse_length(spec_value, "stackup", units) if units else float(spec_value)
    except (ValueError, TypeError):
        return False
    return math.isclose(value, board_value, rel_tol=STACKUP_AGREEMENT, abs_tol=1e-4)


def pair_spec_dict(board: Board, pair: BoardPair, cut_spec_dict: dict,
                   stackup_from_spec: bool = False) -> tuple[dict, frozenset[str]]:
    """The user's spec dict (cut, rules, stackup, ...) completed with the pair's geometry, ready for spec_from_dict.

    Returns the dict and the stack-up keys ("stackup.er", ...) whose values came
    from the board.  The board decides pair.width/spacing/path/layer/nets;
    plane.layers (the pair's reference planes of plane.net), plane.outline (the
    Edge.Cuts polygon under the pair) come from the board unless the spec gives
    them, and plane.layers are verified against the board (``verify_plane_layers``).
    Stack-up: the board's value wherever its stack-up has one; a spec value that
    differs by more than ``STACKUP_AGREEMENT`` is an error unless
    ``stackup_from_spec``, which keeps the spec's values.  Lengths are written in
    mm (as "...mm" strings when the spec's units are not mm), in KiCad's coordinates.
    """
    spec = copy.deepcopy(cut_spec_dict) if cut_spec_dict else {}
    units = str(spec.get("units", "mm")).lower()

    def mm(v: float):
        return float(v) if units == "mm" else f"{float(v)!r}mm"

    def point(p):
        return [mm(p[0]), mm(p[1])]

    path: list = [point(pair.path[0].start)]
    for piece in pair.path:
        path.append(point(piece.end) if isinstance(piece, Line) else {"arc": [point(piece.start), point(piece.mid),
                                                                              point(piece.end)]})
    spec.setdefault("name", _file_name(f"{pair.base}_{pair.layer}"))
    spec["pair"] = {**spec.get("pair", {}), "width": mm(pair.width), "spacing": mm(pair.spacing), "path": path,
                    "layer": pair.layer, "nets": [pair.net_p, pair.net_n]}
    plane = dict(spec.get("plane", {}))
    plane.setdefault("net", pair.plane_net)
    region = polyline_of(pair.path)
    given = "layers" in plane
    if not given:
        found = pair.plane_layers if plane["net"] == pair.plane_net else \
            plane_layers_for(board, pair.layer, str(plane["net"]), region)[0]
        if not found:
            raise SpecError("plane.layers", "(none found)", f"no {plane['net']} zone next to {pair.layer} under "
                            f"{pair.base}; give plane.layers in the spec")
        plane["layers"] = list(found)
    layers = plane["layers"]
    if isinstance(layers, list) and all(isinstance(x, str) for x in layers):
        verify_plane_layers(board, pair, layers, str(plane["net"]), given)
    outline = _outline_under(board, pair)
    if "outline" not in plane and outline is not None:
        plane["outline"] = [point(p) for p in outline]
    spec["plane"] = plane
    stack = dict(spec.get("stackup", {}))
    from_board = set()
    for key, value in board_stackup(board, pair.layer, list(layers), region).items():
        length = key in ("h", "pair_h")
        if key in stack and not _agrees(stack[key], value, units if length else None):
            if stackup_from_spec:
                continue
            shown = [round(v, 4) for v in value] if isinstance(value, list) else round(value, 4)
            raise SpecError(f"stackup.{key}", stack[key], f"the board's stack-up gives {shown}"
                            f"{' mm' if length else ''} here (agreement within {STACKUP_AGREEMENT:.0%}); "
                            "remove the key to use the board's value, or force the spec's with --stackup-from-spec "
                            "(plan: stackup_from_spec = true)")
        stack[key] = [mm(v) for v in value] if isinstance(value, list) else mm(value) if length else value
        from_board.add(f"stackup.{key}")
    for key in ("er", "h"):
        if key not in stack:
            raise SpecError(f"stackup.{key}", "(missing)", "the board's stack-up does not give it; "
                            "add stackup.er and stackup.h to the spec")
    spec["stackup"] = stack
    return spec, frozenset(from_board)


def _file_name(text: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in text).lstrip(".") or "pair"


def _outline_under(board: Board, pair: BoardPair) -> list[tuple[float, float]] | None:
    geom = board.outline
    if geom is None:
        return None
    polys = list(geom.geoms) if isinstance(geom, MultiPolygon) else [geom]
    region = polyline_of(pair.path)
    poly = max(polys, key=lambda g: g.intersection(region).length)
    return [tuple(p) for p in np.asarray(poly.exterior.coords)[:-1].tolist()]


# ---- other copper near a cut ----

def obstacles(board: Board, layout_bounds: tuple[float, float, float, float], plane_layers: Iterable[str],
              margin: float = 1.0, exclude_nets: Iterable[str] = ()) -> tuple[tuple[TrackObstacle, ...],
                                                                            tuple[ViaObstacle, ...]]:
    """Tracks (any copper layer) and vias/pads through the plane layers within ``margin`` of the bounds.

    The board's box indexes (built once per board) pick the candidates for the
    window; only those are turned into objects, so a query costs what is near the
    cut, not what is on the board.  Pads count when their copper reaches a plane
    layer; each becomes a disc of its circumscribed diameter (conservative).
    """
    x0, y0, x1, y1 = layout_bounds
    x0, y0, x1, y1 = x0 - margin, y0 - margin, x1 + margin, y1 + margin
    skip = sorted({i for i in (board.net_index(n) for n in exclude_nets) if i is not None})
    names, layers = board.nets, board.copper_layers
    planes = [board.layer_index(p) for p in plane_layers if board.layer_index(p) is not None]

    def near(kind: str, nets: np.ndarray | None) -> np.ndarray:
        rows = board.boxes(kind).query(x0, y0, x1, y1)
        return rows[~np.isin(nets[rows], skip)] if nets is not None and skip else rows

    tracks: list[TrackObstacle] = []
    seg = board.segments
    for k in near("segments", seg.net).tolist():
        tracks.append(TrackObstacle((tuple(seg.start[k].tolist()), tuple(seg.end[k].tolist())), float(seg.width[k]),
                                    layers[seg.layer[k]], names[seg.net[k]]))
    arc = board.arcs
    if len(arc):
        for k in near("arcs", arc.net).tolist():
            piece = Arc(*(tuple(v[k].tolist()) for v in (arc.start, arc.mid, arc.end)))
            tracks.append(TrackObstacle(tuple(piece_points(piece)), float(arc.width[k]), layers[arc.layer[k]],
                                        names[arc.net[k]]))
    vias: list[ViaObstacle] = []
    via = board.vias
    rows = near("vias", via.net)
    spans_plane = np.zeros(len(rows), dtype=bool)
    for p in planes:
        spans_plane |= (via.layers[rows, 0] <= p) & (via.layers[rows, 1] >= p)
    for k in rows[spans_plane].tolist():
        vias.append(ViaObstacle(tuple(via.at[k].tolist()), float(via.size[k]), names[via.net[k]]))
    pads = board.pads
    if len(pads):
        plane_names = {layers[p] for p in planes}
        for fp_index in sorted(set(pads.footprint[near("pads", None)].tolist())):
            for pad in board.footprint(fp_index).pads:
                d = math.hypot(*pad.size)
                inside = (x0 - d / 2 <= pad.at[0] <= x1 + d / 2) and (y0 - d / 2 <= pad.at[1] <= y1 + d / 2)
                if inside and plane_names & set(pad.copper) and pad.net not in skip:
                    vias.append(ViaObstacle(pad.at, d, pad.net_name))
    tracks.sort(key=lambda t: (t.layer, t.net, t.points))
    vias.sort(key=lambda v: (v.at, v.net))
    return tuple(tracks), tuple(vias)
