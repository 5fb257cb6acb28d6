"""`place`: filters built under a board's pairs and inserted into a new board with one merged rule file.

Everything here is glue: the board reader supplies the pair geometry and the
other copper, the engine builds the layout, the checks measure it against the
board's real tracks, and footprint/rules/insert write the result.  The input
board is never written; the output board differs from it only by inserted items.
What to place where comes from ``plan``; re-checking placed filters is ``recheck``.
"""
from __future__ import annotations

import hashlib
import re
from contextlib import nullcontext
from dataclasses import dataclass, field, replace
from pathlib import Path

from ..checks import run_checks
from ..errors import EbgError, SpecError, located
from ..layout import build_layout, with_copper
from ..outputs import StagedOutputs
from ..path import polyline_of
from ..pipeline import FilterResult, output_names, write_filter
from ..spec import MAX_NAME_BYTES, spec_from_dict
from .board import Board, read_board
from .context import board_context, board_traces, reference_planes
from .footprint import board_footprint_text
from .insert import fill_risks, insert_footprints, zone_priority_for
from .pair_spec import pair_spec_dict
from .pairs import BoardPair, find_pairs
from .plan import Request, _pairs_for, board_files, select_pairs
from .planes import stackup_notes
from .rules import merge_rules, rules_text
from .skeleton import BoardTexts, with_items


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
