"""From a pair's tracks to its coupled runs: the step of pair finding that reads geometry.

Each net's tracks on a layer are chained into ordered runs of lines and arcs
(split at branches, collinear lines and co-circular arcs merged); then the
pieces of a P chain and an N chain that run side by side at one pitch are
paired in order into runs.  ``pairs.find_pairs`` turns each run into a
centre-line; keeping this here leaves that module to the centre-line itself.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely

from ..path import arc_geometry
from ..spec import Arc, Line
from .board import Board

MATCH_TOLERANCE_MM = 1e-3
"""Two pieces are partners when their distance stays within this of the pair's pitch (1 um)."""
JOIN_TOLERANCE_MM = 1e-4
"""Track ends closer than this are one node of a chain (KiCad writes exact 1 nm coordinates)."""


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
