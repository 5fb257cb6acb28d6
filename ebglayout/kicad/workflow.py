"""Board-level jobs: list pairs, place filters under pairs, re-check placed filters.

Everything here is glue: the board reader supplies the pair geometry and the
other copper, the engine builds the layout, the checks measure it against the
board's real tracks, and footprint/rules/insert write the result.  The input
board is never written; the output board differs from it only by inserted items.
"""
from __future__ import annotations

import bisect
import fnmatch
import hashlib
import json
import math
import re
from contextlib import nullcontext
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import shapely
from shapely.affinity import affine_transform
from shapely.geometry import LineString
from shapely.ops import linemerge

from ..checks import CheckReport, run_checks
from ..checks.context import CheckContext, RuleResult
from ..errors import BoardError, EbgError, SpecError, located
from ..layout import Layout, build_layout, trace_from_line, with_copper
from ..outputs import StagedOutputs
from ..path import piece_points, polyline_of
from ..pipeline import FilterResult, can_fork, output_names, write_filter
from ..spec import MAX_NAME_BYTES, Arc, read_toml, spec_from_dict
from .board import Board, read_board
from .footprint import DESIGN_PROPERTY, board_footprint_text, footprint_origin
from .insert import board_version, fill_risks, insert_footprints, plane_net, zone_priority_for
from .pairs import (BoardPair, board_stackup, find_pairs, nearest_planes, obstacles, pair_nets, pair_spec_dict,
                    plane_layers_for, stackup_notes)
from .placed import board_cuts, placed_results
from .rules import merge_rules, rules_text
from .sexpr import error_at, unescape


@dataclass(frozen=True)
class Request:
    """Place the filter of ``spec`` (raw spec dict, from ``source``) under the pair(s) selected by nets or pattern."""

    spec: dict
    source: str
    pair: tuple[str, str] | None = None
    match: str | None = None
    stackup_from_spec: bool = False
    """Keep the spec's stack-up values where they disagree with the board's (else that is an error)."""
    label: str = ""
    """Where the request came from, for error messages: e.g. 'plan.toml filter[1] (match "HX2_L*")'."""

    def where(self, pair: BoardPair | None = None) -> str:
        """The request (and the pair) an error belongs to."""
        parts = [self.label] if self.label else []
        return " ".join(parts + ([f"under pair {pair.base} ({pair.net_p}/{pair.net_n})"] if pair else []))


@dataclass
class PlacedFilter:
    reference: str
    pair: BoardPair
    result: FilterResult
    design: dict
    item: str


@dataclass
class Placement:
    """What `place` did: the filters, the new board text and rule text, and the fill risks KiCad's pour would hit."""

    filters: list[PlacedFilter]
    board_text: str
    rules_text: str
    risks: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    """What the reader noticed about the board (missing stack-up, unknown items) and where defaults came from."""


def load_spec_dict(path: str | Path) -> dict:
    return read_toml(path)


PLAN_KEYS = {"spec", "pair", "match", "stackup_from_spec"}
"""The keys a plan's [[filter]] table may hold."""


def load_plan(path: str | Path) -> list[Request]:
    """A plan: one ``[[filter]]`` table per rule, ``spec`` relative to the plan, and ``pair = [P, N]`` or ``match``."""
    path = Path(path)
    raw = load_spec_dict(path)
    if set(raw) - {"filter"} or not isinstance(raw.get("filter"), list) or not raw["filter"]:
        raise SpecError("plan", path.name, "must hold one or more [[filter]] tables and nothing else")
    requests = []
    for i, item in enumerate(raw["filter"]):
        key = f"filter[{i}]"
        if not isinstance(item, dict) or "spec" not in item or set(item) - PLAN_KEYS:
            raise SpecError(key, item, "must be {spec = \"path.toml\", pair = [\"P\", \"N\"]} or {spec = ..., match = "
                            "\"LANE*\"}, optionally with stackup_from_spec = true")
        if ("pair" in item) == ("match" in item):
            raise SpecError(key, item, "give exactly one of pair = [P, N] and match = \"pattern\"")
        pair = item.get("pair")
        if pair is not None and (not isinstance(pair, list) or len(pair) != 2 or not all(isinstance(n, str) for n in pair)):
            raise SpecError(f"{key}.pair", pair, "must be two net names [P, N]")
        if "match" in item and not isinstance(item["match"], str):
            raise SpecError(f"{key}.match", item["match"], "must be a shell-style pattern string")
        if not isinstance(item.get("stackup_from_spec", False), bool):
            raise SpecError(f"{key}.stackup_from_spec", item["stackup_from_spec"], "must be true or false")
        spec_path = (path.parent / str(item["spec"])).resolve()
        chosen = f"pair {pair}" if pair else f"match \"{item['match']}\""
        requests.append(Request(load_spec_dict(spec_path), str(spec_path), tuple(pair) if pair else None,
                                item.get("match"), item.get("stackup_from_spec", False),
                                label=f"{path.name} {key} ({chosen})"))
    return requests


def select_pairs(pairs: list[BoardPair], request: Request) -> list[BoardPair]:
    """The pair runs a request names: the longest run of the named pair, or of every pair matching the pattern."""
    longest: dict[str, BoardPair] = {}
    for bp in pairs:
        if bp.base not in longest or bp.length > longest[bp.base].length:
            longest[bp.base] = bp
    if request.pair is not None:
        wanted = set(request.pair)
        found = [bp for bp in longest.values() if {bp.net_p, bp.net_n} == wanted]
        if not found:
            known = ", ".join(f"{bp.net_p}/{bp.net_n}" for bp in sorted(longest.values(), key=lambda b: b.base)) or "none"
            raise SpecError("--pair", " ".join(request.pair), f"is not a routed differential pair on this board "
                            f"(pairs found: {known})")
        return found
    found = [bp for base, bp in sorted(longest.items()) if fnmatch.fnmatchcase(base, request.match)]
    if not found:
        raise SpecError("match", request.match, "matches no differential pair on this board")
    return found


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


def board_skeleton(board: Board, nets: bool = False, footprints: bool = False) -> str:
    """The board text cut down to what the insert module reads, for its per-filter calls.

    Kept: every byte up to the end of the first item (the version stamp), the layer
    table and the top-level zones without their fills; with ``nets`` the net
    declarations, with ``footprints`` the footprints that hold zones.  Those readers
    walk every parenthesis in Python: seconds per call on a board of 10^5 tracks,
    milliseconds on this text.  Items keep their bytes, so they read the same values.
    """
    data = board.data
    if not len(board.items):
        return data[:board.root[1] - 1].decode("utf-8") + "\n)\n"
    first_end = int(board.items[0][1])
    heads = ["layers", "zone"] + (["net"] if nets else [])
    spans = [board.spans(h) for h in heads]
    if footprints:
        spans.append(np.array([(a, b) for a, b in board.spans("footprint").tolist() if b"(zone" in data[a:b]],
                              dtype=np.int64).reshape(-1, 2))
    spans = np.concatenate(spans)
    spans = spans[np.argsort(spans[:, 0])]
    fills = sorted(span for zone in board.zones for span in zone.fill_spans)
    starts = [a for a, _ in fills]
    parts = [data[:first_end]]
    for a, b in spans[spans[:, 0] >= first_end].tolist():
        k, pos = bisect.bisect_left(starts, a), a
        parts.append(b"\n  ")
        while k < len(fills) and fills[k][0] < b:
            parts.append(data[pos:fills[k][0]])
            pos = fills[k][1]
            k += 1
        parts.append(data[pos:b])
    parts.append(b"\n)\n")
    return b"".join(parts).decode("utf-8")


class BoardTexts:
    """The small board texts one board's filters share (see ``board_skeleton``), each cut once on first use."""

    def __init__(self, board: Board):
        self.board = board
        self._texts: dict[tuple[bool, bool], str] = {}
        self._plane_nets: dict[str, tuple[int, str]] = {}
        self._version: int | None = None

    def text(self, nets: bool = False, footprints: bool = False) -> str:
        key = (nets, footprints)
        if key not in self._texts:
            self._texts[key] = board_skeleton(self.board, nets=nets, footprints=footprints)
        return self._texts[key]

    @property
    def version(self) -> int:
        """``insert.board_version`` of the board."""
        if self._version is None:
            self._version = board_version(self.text(), self.board.name)
        return self._version

    def plane_net(self, name: str) -> tuple[int, str]:
        """``insert.plane_net`` of the board, per net name."""
        if name not in self._plane_nets:
            self._plane_nets[name] = plane_net(self.text(nets=True), name, self.board.name)
        return self._plane_nets[name]


def with_items(board: Board, items: list[str]) -> str:
    """``insert_footprints(board.text, items)`` from the reader's spans: the root's closing parenthesis is known."""
    close = board.insert_offset
    inserted = "".join(item if item.endswith("\n") else item + "\n" for item in items)
    if inserted and board.data[close - 1:close] != b"\n":
        inserted = "\n" + inserted
    return board.splice(close, close, inserted).decode("utf-8")


def _next_reference(board: Board, taken: set[str]) -> str:
    used = {fp.reference for fp in board.footprints} | taken
    n = 1
    while f"FIL{n}" in used:
        n += 1
    return f"FIL{n}"


def _filter_name(base: str, spec: dict, source: str) -> str:
    stem = str(spec.get("name") or Path(source).stem)
    text = f"{base}_{stem}" if base not in stem else stem
    name = re.sub(r"[^A-Za-z0-9_.-]", "_", text).lstrip(".") or "filter"
    if len(name) > MAX_NAME_BYTES:  # long hierarchical net names: keep the name a file name, and distinct
        name = name[: MAX_NAME_BYTES - 9] + "_" + hashlib.sha256(name.encode()).hexdigest()[:8]
    return name


def build_on_board(board: Board, request: Request, pair: BoardPair, reference: str, texts: BoardTexts | None = None,
                   references: dict[str, tuple[str, ...]] | None = None) -> PlacedFilter:
    """Build, estimate and check one filter under ``pair`` against the board's real copper.

    ``texts`` (``BoardTexts(board)``) and ``references`` (``reference_planes(board)``)
    are passed in when many filters share one board, so each is made once.
    """
    from ..estimate.band import estimate_layout

    user = {k: (dict(v) if isinstance(v, dict) else v) for k, v in request.spec.items()}
    user.get("plane", {}).pop("outline", None)  # on a board, the board's Edge.Cuts decide the outline
    design, from_board = pair_spec_dict(board, pair, user, request.stackup_from_spec)
    design["name"] = _filter_name(pair.base, request.spec, request.source)
    spec = replace(spec_from_dict(design, default_name=design["name"]), stackup_from_board=from_board)
    layout = build_layout(spec)
    if layout.route_generated:
        raise SpecError("cut.style", "folded", f"{pair.base} is routed straight on the board; `place` never re-routes "
                        "tracks, so draw the folded route on the board first (or use `build` to get the route)")
    layout = with_copper(layout, traces=board_traces(board, layout, pair))
    estimate = estimate_layout(layout)
    context = board_context(board, layout, pair, references=references)
    checks = run_checks(layout, context, estimate=estimate)
    texts = texts if texts is not None else BoardTexts(board)
    item = board_footprint_text(layout, texts.version, reference=reference, plane_net=texts.plane_net(spec.plane_net),
                                zone_priority=zone_priority_for(texts.text(), layout, spec.plane_net, board.name),
                                design=design)
    return PlacedFilter(reference, pair, FilterResult(layout, checks, estimate, context), design, item)


def plan_placement(board: Board, requests: list[Request], existing_rules: str | None, progress=None) -> Placement:
    """Every filter of every request, inserted into one new board text with one merged rule file."""
    pairs = _pairs_for(board, requests)
    jobs = []
    for request in requests:
        try:
            try:
                chosen = select_pairs(pairs, request)
            except SpecError:
                chosen = select_pairs(find_pairs(board), request)  # the error then lists every pair on the board
        except EbgError as err:
            raise located(err, request.where()) if request.label else err
        jobs += [(request, pair) for pair in chosen]
    seen: set[str] = set()
    for _, pair in jobs:
        if pair.base in seen:
            raise SpecError("pair", pair.base, "is asked for twice; one filter per pair")
        seen.add(pair.base)
    placed: list[PlacedFilter] = []
    taken: set[str] = set()
    texts, references = BoardTexts(board), reference_planes(board)
    for request, pair in (progress(jobs) if progress else jobs):
        reference = _next_reference(board, taken)
        taken.add(reference)
        try:
            placed.append(build_on_board(board, request, pair, reference, texts, references))
        except EbgError as err:
            raise located(err, request.where(pair)) from None
    items = [p.item for p in placed]
    new_text = with_items(board, items)
    rules = merge_rules(existing_rules, rules_text(*(p.result.layout for p in placed)))
    # fill_risks reads the layers, zones and (for bridged cuts only) footprints of new_text; these texts hold them.
    bridged = any(p.result.layout.spec.style == "bridged" for p in placed)
    with_footprints = insert_footprints(texts.text(footprints=True), items, board.name) if bridged else None
    risks = [f"{p.reference} {p.result.name}: {risk}" for p in placed
             for risk in fill_risks(with_footprints if p.result.layout.spec.style == "bridged" else texts.text(),
                                    p.result.layout, p.result.layout.spec.plane_net, rules)]
    notes = list(board.warnings)
    for p in placed:
        notes += [f"{p.pair.base}: {w}" for w in p.pair.warnings]
        spec = p.result.layout.spec
        notes += [f"{p.pair.base}: {note}"
                  for note in stackup_notes(board, spec.pair_layer, list(spec.plane_layers), polyline_of(p.pair.path))]
        sources = p.result.layout.stackup.sources
        kept = [key for key, source in sources if source == "spec"]
        if kept:
            notes.append(f"{p.pair.base}: stack-up values from the spec, not the board: {', '.join(kept)}")
    return Placement(placed, new_text, rules, risks, notes)


def _pairs_for(board: Board, requests: list[Request]) -> list[BoardPair]:
    """The pairs the requests can select, chosen by name before any geometry is read."""
    wanted = {base for base, net_p, net_n in pair_nets(board.nets) for request in requests
              if (request.pair is not None and {net_p, net_n} == set(request.pair))
              or (request.match is not None and fnmatch.fnmatchcase(base, request.match))}
    return find_pairs(board, only=wanted) if wanted else []


def board_files(board_path: str | Path) -> tuple[Path, Path]:
    """The files a board job reads: the board and the rules file beside it (which need not exist)."""
    return Path(board_path), Path(board_path).with_suffix(".kicad_dru")


def place(board_path: str | Path, requests: list[Request], out_path: str | Path, artifacts: str | Path | None = None,
          force: bool = False, progress=None, inputs=()) -> Placement:
    """`ebglayout place`: write a new board (and its .kicad_dru) with filters under the requested pairs.

    Nothing is written over the board, its rules, the specs or any other of ``inputs`` (a plan file)."""
    (board_path, source_rules), out_path = board_files(board_path), Path(out_path)
    if out_path.suffix != ".kicad_pcb":
        raise SpecError("--out", str(out_path), "must name a new .kicad_pcb file")
    inputs = (board_path, source_rules, *inputs, *(Path(r.source) for r in requests))
    staged = StagedOutputs(out_path.parent, force=force, inputs=inputs)
    art = StagedOutputs(artifacts, force=force, inputs=inputs, option="--artifacts") if artifacts else None
    rules_name = out_path.with_suffix(".kicad_dru").name
    with staged, art if art else nullcontext():
        staged.require_free([out_path.name, rules_name])
        board = read_board(board_path)
        existing = source_rules.read_text(encoding="utf-8") if source_rules.exists() else None
        placement = plan_placement(board, requests, existing, progress)
        if art:
            art.require_free([n for p in placement.filters for n in output_names(p.result.name, p.result.name)])
        with staged.writing(out_path.name) as path, open(path, "w", encoding="utf-8", newline="") as handle:
            handle.write(placement.board_text)
        staged.write_text(rules_name, placement.rules_text)
        for p in placement.filters if art else ():
            write_filter(p.result, art, folder=p.result.name)
    return placement


# ---- re-checking filters already on a board ----

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


def pair_table(board: Board, min_run: float = 2.0) -> list[dict]:
    """`ebglayout pairs`: every pair found, with the straight runs long enough for a filter.

    ``planes`` are the pair's nearest planes of the GND net, ``references`` its
    nearest planes of any net (the return path; `place` cuts only those), and
    ``stackup`` the stack-up keys `place` takes from the board for a filter in
    the references (``pairs.board_stackup``), without "stackup.".
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
