"""`check --board`: every filter already on a board re-checked against the board's copper as it is now.

Reads the design each filter's footprint stores, rebuilds it, moves its cells
to where the footprint sits now, takes its cut from the board's own items
(``placed``) and checks it in its board context (``context``), shared between
this process and forked workers on a big board.  Kept apart from `place`,
which writes boards, because this only reads them.
"""
from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import shapely
from shapely.affinity import affine_transform

from ..checks import CheckReport, run_checks
from ..checks.context import CheckContext, RuleResult
from ..errors import EbgError
from ..layout import Layout, build_layout, with_copper
from ..pipeline import can_fork
from ..spec import spec_from_dict
from .board import Board, read_board
from .context import board_context, board_traces, reference_planes
from .footprint import DESIGN_PROPERTY, footprint_origin
from .insert import fill_risks
from .pairs import find_pairs
from .placed import board_cuts, placed_results
from .sexpr import error_at, unescape
from .skeleton import BoardTexts


def placed_designs(board: Board) -> list[tuple[object, dict]]:
    """(footprint, design spec dict) for every ebglayout filter on the board, found by its design property."""
    pattern = re.compile(rb'\(property "' + DESIGN_PROPERTY.encode() + rb'" "((?:[^"\\]|\\.)*)"')
    found = []
    for index, (start, end) in enumerate(board.footprint_spans.tolist()):
        match = pattern.search(board.data, start, end)
        if not match:
            continue
        try:
            design = json.loads(unescape(match.group(1).decode("utf-8")))
        except (ValueError, UnicodeDecodeError, RecursionError):
            raise error_at(board.name, board.data, start,
                           f"footprint carries an unreadable {DESIGN_PROPERTY}") from None
        found.append((board.footprint(index), design))
    return found


def _cells_moved(layout: Layout, footprint) -> Layout:
    """The design's cells moved, turned and (on B.Cu) mirrored to where the footprint sits now.

    KiCad: y down, board = at + R(t) (local), and a flipped footprint's local frame is
    the placed one mirrored in y (its file coordinates are already mirrored).  Only
    the cells move; the cuts are read from the board (``placed.board_cuts``).
    """
    ox, oy = footprint_origin(layout)
    (x, y), rot = footprint.at, footprint.rotation
    flip = -1.0 if footprint.layer == "B.Cu" else 1.0
    if math.isclose(x, ox, abs_tol=1e-6) and math.isclose(y, oy, abs_tol=1e-6) \
            and math.isclose(rot % 360, 0, abs_tol=1e-9) and flip > 0:
        return layout
    t = math.radians(rot)
    c, s = math.cos(t), math.sin(t)
    xx, xy, yx, yy = c, s * flip, -s, c * flip
    matrix = [xx, xy, yx, yy, x - xx * ox - xy * oy, y - yx * ox - yy * oy]
    cells = tuple(replace(cell, patch=affine_transform(cell.patch, matrix), outer=affine_transform(cell.outer, matrix),
                          bridges=tuple(affine_transform(b, matrix) for b in cell.bridges),
                          centre=tuple(np.round(affine_transform(shapely.Point(cell.centre), matrix).coords[0], 6)),
                          rotation_deg=(flip * cell.rotation_deg - rot) % 360)
                  for cell in layout.cells)
    return replace(layout, cells=cells)


FILTERS_PER_PROCESS = 4
"""Fewest filters worth a forked worker for `check --board` (a fork and its copy-on-write pages cost about one)."""


@dataclass
class _Recheck:
    """What every filter's re-check on one board reads: the board, its pairs, rule file, references and texts."""

    board: Board
    designs: list
    pairs: list
    rules: str | None
    references: dict
    texts: BoardTexts


def check_board(board_path: str | Path, jobs: int = 1) -> list[CheckReport]:
    """`ebglayout check --board`: every placed filter re-checked against the board's copper as it is now.

    ``jobs`` > 1 shares the filters between this process and ``jobs - 1`` forked
    workers (on Linux, see ``pipeline.can_fork``; never inside KiCad, whose plugin passes 1),
    at least ``FILTERS_PER_PROCESS`` filters each.  Reports come back in board
    order either way.  A filter whose check fails in a worker, or every filter of
    a worker that died, is checked again here, so an error is raised exactly as a
    serial run raises it.
    """
    board = read_board(board_path)
    designs = placed_designs(board)
    if not designs:
        return []
    pairs = find_pairs(board, only={net for _, design in designs for net in _design_nets(design)})
    rules_path = Path(board_path).with_suffix(".kicad_dru")
    rules = rules_path.read_text(encoding="utf-8") if rules_path.exists() else None
    job = _Recheck(board, designs, pairs, rules, reference_planes(board), BoardTexts(board))
    jobs = max(1, min(jobs, len(designs) // FILTERS_PER_PROCESS))
    # The first filter is checked here before any fork, which also builds the board's lazy indexes and texts
    # once for every worker to inherit.
    reports = [_recheck(job, 0)]
    if jobs == 1 or not can_fork():
        return reports + [_recheck(job, k) for k in range(1, len(designs))]
    import multiprocessing  # imported here: a one-process check (the plugin's) does not pay for them
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool

    global _RECHECK
    share = -(-len(designs) // jobs)
    shares = [range(a, min(a + share, len(designs))) for a in range(share, len(designs), share)]
    _RECHECK = job
    try:
        with ProcessPoolExecutor(len(shares), mp_context=multiprocessing.get_context("fork")) as pool:
            pending = [pool.submit(_recheck_in_worker, part) for part in shares]
            reports += [_recheck(job, k) for k in range(1, share)]
            for part, future in zip(shares, pending):
                try:
                    theirs = future.result()
                except BrokenProcessPool:
                    theirs = [None] * len(part)
                reports += [r if r is not None else _recheck(job, k) for k, r in zip(part, theirs)]
    finally:
        _RECHECK = None
    return reports


_RECHECK: _Recheck | None = None
"""The job a forked worker inherits (set only while the pool runs)."""


def _recheck_in_worker(indices: range) -> list[CheckReport | None]:
    """A worker's share; None where a filter's check raised (the parent checks it again and raises)."""
    out = []
    for index in indices:
        try:
            out.append(_recheck(_RECHECK, index))
        except Exception:  # noqa: BLE001 - see the docstring
            out.append(None)
    return out


def _recheck(job: _Recheck, index: int) -> CheckReport:
    """One placed filter measured on the board's own cut, then compared with the design stored in its footprint."""
    from ..estimate.band import estimate_layout

    board, (footprint, design) = job.board, job.designs[index]
    try:
        spec = spec_from_dict(design, default_name=str(design.get("name", footprint.value)))
        designed = build_layout(spec)
    except EbgError as err:
        raise error_at(board.name, board.data, footprint.span[0], f"footprint {footprint.reference}: its "
                       f"{DESIGN_PROPERTY} cannot be rebuilt: {err}") from None
    on_board = board_cuts(board, footprint, designed)
    layout = with_copper(_cells_moved(designed, footprint), cuts=on_board.cuts)
    match = [bp for bp in job.pairs if {bp.net_p, bp.net_n} == set(spec.nets) and bp.layer == spec.pair_layer]
    if match:
        pair = max(match, key=lambda bp: bp.length)
        layout = with_copper(layout, traces=board_traces(board, layout, pair))
    estimate = estimate_layout(layout)
    context = board_context(board, layout, match[0], estimate, job.references) if match \
        else CheckContext(estimate=estimate)
    report = run_checks(layout, context, estimate=estimate)
    fill = RuleResult("kicad-fill", checked=1, unit="")
    present = replace(layout, cuts=tuple(c for c in layout.cuts if not c.outline.is_empty))  # placed-footprint: the rest
    for risk in fill_risks(job.texts.text(footprints=spec.style == "bridged"), present, spec.plane_net, job.rules):
        fill.add("warning", risk, layout.cells[0].centre)
    if not match:
        fill.add("error", f"{footprint.reference}: pair {'/'.join(spec.nets)} is no longer routed on "
                 f"{spec.pair_layer}", layout.cells[0].centre)
    placed = placed_results(designed, layout, footprint, footprint_origin(designed), on_board)
    return replace(report, name=f"{footprint.reference} {report.name}", results=report.results + (fill, *placed))


def _design_nets(design: dict) -> list[str]:
    """The pair nets a stored design names (none when it is malformed; spec_from_dict reports that)."""
    pair = design.get("pair")
    nets = pair.get("nets") if isinstance(pair, dict) else None
    return [n for n in nets if isinstance(n, str)] if isinstance(nets, list) else []
