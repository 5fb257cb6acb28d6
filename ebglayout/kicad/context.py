"""What a filter on a board is checked against: the board's copper around its cut.

Reads, for one layout under one pair: other copper near the cut (tracks, and
vias and pads through the plane layers), the pair's real tracks as traces, the
board outline and every layer's reference planes, and hands them to the checks
as a ``CheckContext``.  `place` and `check --board` measure a filter the same
way because both take its context from here.
"""
from __future__ import annotations

import math
from typing import Iterable

import numpy as np
import shapely
from shapely.geometry import LineString
from shapely.ops import linemerge

from ..checks.context import CheckContext
from ..errors import BoardError
from ..layout import Layout, trace_from_line
from ..path import piece_points, polyline_of
from ..spec import Arc, TrackObstacle, ViaObstacle
from .board import Board
from .pairs import BoardPair
from .planes import nearest_planes, plane_layers_for


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


def net_lines(board: Board, net: str, layer: str) -> list[LineString]:
    """One net's tracks on one layer chained into polylines (arcs as chords within 0.25 um)."""
    ni, li = board.net_index(net), board.layer_index(layer)
    if ni is None or li is None:
        return []
    seg, arc = board.segments, board.arcs
    rows = board.net_rows("segments", ni)
    rows = rows[seg.layer[rows] == li]
    lines = [LineString([tuple(a), tuple(b)]) for a, b in zip(seg.start[rows].tolist(), seg.end[rows].tolist())]
    rows = board.net_rows("arcs", ni)
    rows = rows[arc.layer[rows] == li]
    for s, m, e in zip(arc.start[rows].tolist(), arc.mid[rows].tolist(), arc.end[rows].tolist()):
        lines.append(LineString(piece_points(Arc(tuple(s), tuple(m), tuple(e)))))
    if not lines:
        return []
    merged = linemerge(lines)
    return list(getattr(merged, "geoms", [merged]))


def cut_extent(layout: Layout):
    """Where the filter is: its cuts, or its cells where a board holds no cut of it any more."""
    extent = shapely.union_all([c.outline for c in layout.cuts])
    return extent if not extent.is_empty else shapely.union_all([c.outer for c in layout.cells])


def board_traces(board: Board, layout: Layout, pair: BoardPair) -> tuple:
    """The pair's real copper near the cut, as traces the crossing code can measure."""
    area = cut_extent(layout).buffer(1.0)
    traces = []
    for polarity, net in (("P", pair.net_p), ("N", pair.net_n)):
        candidates = net_lines(board, net, pair.layer)
        if not candidates:
            raise BoardError(f"{board.name}: net {net} has no tracks on {pair.layer}")
        line = max(candidates, key=lambda g: g.intersection(area).length)
        traces.append(trace_from_line(polarity, net, pair.layer, pair.width, line))
    return tuple(traces)


def reference_planes(board: Board) -> dict[str, tuple[str, ...]]:
    """Each copper layer's nearest copper-zone layers above and below (of any net)."""
    # A signal layer's return current runs on the nearest plane of any net, so references ignore the net.
    return {layer: plane_layers_for(board, layer, None)[0] for layer in board.copper_layers}


def board_context(board: Board, layout: Layout, pair: BoardPair, estimate=None,
                  references: dict[str, tuple[str, ...]] | None = None) -> CheckContext:
    """Other copper near the cut, the board outline, whether the pair has planes on both sides, and references.

    ``references`` is ``reference_planes(board)``, passed in when many filters share one board.
    """
    spec = layout.spec
    bounds = cut_extent(layout).bounds
    tracks, vias = obstacles(board, bounds, spec.plane_layers, exclude_nets=spec.nets)
    found, _ = plane_layers_for(board, spec.pair_layer, spec.plane_net)
    outline = board.outline
    if outline is not None and outline.geom_type == "MultiPolygon":
        centre = shapely.Point(layout.cells[0].centre)
        outline = min(outline.geoms, key=lambda g: g.distance(centre))
    if references is None:
        references = reference_planes(board)
    pair_planes = tuple(nearest_planes(board, pair.layer, polyline_of(pair.path)))
    return CheckContext(tracks=tracks, vias=vias, plane_outline=outline, sandwiched=len(found) == 2,
                        references=references, copper_layers=board.copper_layers, pair_planes=pair_planes,
                        estimate=estimate)
