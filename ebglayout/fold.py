"""Folded filters: the pair crosses one row of cells several times.

Two ways in:
- the spec path already folds: parallel straight runs that overlap along their
  direction are found and the row is laid across them (``find_lanes``);
- the spec path is straight there: a serpentine is generated (``generate_fold``)
  with ``passes`` lanes along the row, semicircular U-turns over solid plane and
  45-degree jogs in and out.  Turns alternate in sense, so with an odd number
  of passes the P/N length differences of the turns cancel in pairs.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import SpecError
from .path import CentreLine, to_board, to_local
from .placement import CellPlacement, choose_run, row_offsets
from .spec import Arc, FilterSpec, Line
from .units import format_mm


@dataclass(frozen=True)
class Turn:
    """One U-turn of a generated fold: where it is and the P-minus-N length it adds."""

    at: tuple[float, float]
    p_minus_n: float


@dataclass(frozen=True)
class Fold:
    cells: list[CellPlacement]
    pieces: tuple[Line | Arc, ...]
    turns: tuple[Turn, ...]
    generated: bool


def lanes_needed_across(spec: FilterSpec) -> float:
    """Across size the patches need so every pass crosses clear of the corners."""
    return (spec.passes - 1) * spec.lane_pitch + 2 * spec.trace_offset + spec.pair_width + 2 * spec.corner_margin


def fold(spec: FilterSpec, centre_line: CentreLine) -> Fold:
    """Place a folded row: across an existing fold if the path has one, else generate the route."""
    offsets, length = row_offsets(spec)
    found = find_lanes(spec, centre_line, length)
    if found is not None:
        origin, heading, u0, v_mid = found
        cells = _cells_along(spec, offsets, origin, heading, u0, v_mid)
        return Fold(cells, centre_line.pieces, (), generated=False)
    if spec.passes % 2 == 0:
        raise SpecError("cut.passes", spec.passes, "a generated fold needs an odd number of passes so the pair leaves "
                        "in its original direction; use an odd count or draw the folded route in pair.path")
    return generate_fold(spec, centre_line, offsets, length)


def _cells_along(spec: FilterSpec, offsets: list[float], origin, heading: float, u0: float, v: float) -> list[CellPlacement]:
    local = np.array([[u0 + off, v] for off in offsets])
    board = to_board(local, origin, heading)
    return [CellPlacement(i, (float(x), float(y)), heading, size)
            for i, ((x, y), size) in enumerate(zip(board, spec.patches))]


def _check_across(spec: FilterSpec) -> None:
    need = lanes_needed_across(spec)
    narrow = min(b for _, b in spec.patches)
    if narrow + 1e-9 < need:
        raise SpecError("cut.patch", f"{narrow:g} mm across",
                        f"{spec.passes} passes at a lane pitch of {format_mm(spec.lane_pitch)} need patches at least "
                        f"{format_mm(need)} across (pair width plus corner margins)")


def find_lanes(spec: FilterSpec, centre_line: CentreLine, row_length: float):
    """Find ``passes`` parallel runs of an already folded path that overlap by the row length.

    Returns (origin, heading, u of the row start, v of the row centre) in the
    frame of the first such run, or None when the path does not fold.
    """
    runs = centre_line.straight_runs()
    best = None
    for base in runs:
        group = [r for r in runs if abs(math.sin(r.heading - base.heading)) < 1e-9]
        if len(group) < 2:
            continue
        lanes = []
        for r in group:
            lo, hi = r.usable
            a, b = to_local(np.array([r.point_at(lo), r.point_at(hi)]), base.start, base.heading)
            lanes.append((float(a[1]), min(a[0], b[0]), max(a[0], b[0]), r))
        lanes.sort(key=lambda t: t[0])
        for i in range(len(lanes) - spec.passes + 1):
            window = lanes[i:i + spec.passes]
            if len(window) < spec.passes:
                continue
            u_lo, u_hi = max(w[1] for w in window), min(w[2] for w in window)
            if u_hi - u_lo + 1e-9 < row_length:
                continue
            span = window[-1][0] - window[0][0]
            if best is None or (u_hi - u_lo) > best[0]:
                best = (u_hi - u_lo, base, u_lo, u_hi, (window[0][0] + window[-1][0]) / 2, span)
    if best is None:
        return None
    _, base, u_lo, u_hi, v_mid, span = best
    need = span + 2 * spec.trace_offset + spec.pair_width + 2 * spec.corner_margin
    narrow = min(b for _, b in spec.patches)
    if narrow + 1e-9 < need:
        raise SpecError("cut.patch", f"{narrow:g} mm across", f"the folded route's {spec.passes} passes span "
                        f"{format_mm(span)}; patches must be at least {format_mm(need)} across to cover them")
    u0 = (u_lo + u_hi - row_length) / 2
    return base.start, base.heading, u0, v_mid


def generate_fold(spec: FilterSpec, centre_line: CentreLine, offsets: list[float], row_length: float) -> Fold:
    """Replace one straight run with a serpentine of ``passes`` lanes across the row."""
    _check_across(spec)
    k, pitch, clear = spec.passes, spec.lane_pitch, spec.turn_clearance
    radius = pitch / 2
    lanes_v = [(i - (k - 1) / 2) * pitch for i in range(k)]
    jog = abs(lanes_v[0])
    lead = clear + radius + pitch + jog
    run, s0 = choose_run(spec, centre_line.straight_runs(), row_length, spec.start, lead=lead)
    u0, u1 = s0 - run.s_start, s0 - run.s_start + row_length
    right_u, left_u = u1 + clear, u0 - clear

    points: list[tuple[float, float]] = [(0.0, 0.0), (u0 - lead, 0.0), (u0 - lead + jog, lanes_v[0])]
    arcs: dict[int, tuple[float, float]] = {}
    turns: list[Turn] = []
    d = spec.trace_offset
    for i in range(k - 1):
        at_right = i % 2 == 0
        u_turn = right_u if at_right else left_u
        mid_v = (lanes_v[i] + lanes_v[i + 1]) / 2
        points.append((u_turn, lanes_v[i]))
        arcs[len(points) - 1] = (u_turn + (radius if at_right else -radius), mid_v)
        points.append((u_turn, lanes_v[i + 1]))
        # Counter-clockwise at the right end puts P (left of travel) inside: shorter by pi * 2d.
        turns.append(Turn(at=(u_turn + (radius if at_right else -radius), mid_v),
                          p_minus_n=(-1 if at_right else 1) * math.pi * 2 * d))
    exit_u = u1 + lead - jog
    points += [(exit_u, lanes_v[-1]), (exit_u + jog, 0.0), (run.length, 0.0)]

    board = to_board(np.array(points), run.start, run.heading)
    fold_pieces: list[Line | Arc] = []
    for j in range(len(points) - 1):
        a, b = tuple(map(float, board[j])), tuple(map(float, board[j + 1]))
        if j in arcs:
            mid = to_board(np.array([arcs[j]]), run.start, run.heading)[0]
            fold_pieces.append(Arc(a, (float(mid[0]), float(mid[1])), b))
        elif math.dist(a, b) > 1e-9:
            fold_pieces.append(Line(a, b))
    pieces = centre_line.pieces[:run.first_piece] + tuple(fold_pieces) + centre_line.pieces[run.last_piece + 1:]
    turn_pts = to_board(np.array([t.at for t in turns]), run.start, run.heading) if turns else []
    turns = [Turn((float(p[0]), float(p[1])), t.p_minus_n) for p, t in zip(turn_pts, turns)]
    cells = _cells_along(spec, offsets, run.start, run.heading, u0, 0.0)
    return Fold(cells, pieces, tuple(turns), generated=True)

