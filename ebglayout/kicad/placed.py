"""A placed filter's cut as the board holds it, and where that differs from the design stored in its footprint.

``board_cuts`` reads the filter footprint's own copper: its rule areas (no copper
pour), filled copper polygons and copper zones on each plane layer, as placed
(zones are written in board coordinates, polygons are moved from the footprint's
frame by ``board.Footprint``), inside the plane zones of the plane's net.  The
result is one ``PlaneCut`` per plane layer of the design, which ``with_copper``
puts into the layout so the ordinary crossing, width and foreign-copper rules
measure the board and not the design.

``placed_results`` then compares that cut with the stored design, which is only
the reference here: slot area lost or added, patch copper removed or changed,
and the footprint moved, turned or flipped away from where it was placed.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import shapely
from shapely.geometry import MultiPolygon
from shapely.ops import unary_union

from ..checks.context import RuleResult
from ..layout import Layout, PlaneCut, as_multipolygon
from .board import Board, Footprint

SLIVER_MM = 0.001
"""Differences thinner than this are rounding of the written coordinates (1 nm grid, rotated points), not edits."""
MOVE_MM = 1e-6
"""A footprint nearer than this to its placed position has not moved (KiCad writes 1 nm steps)."""
EMPTY = MultiPolygon()


@dataclass(frozen=True)
class BoardCut:
    """What the board holds of one filter: a cut per design plane layer, and copper on layers the design never cut."""

    cuts: tuple[PlaneCut, ...]
    elsewhere: dict[str, MultiPolygon]


def _union(geoms) -> MultiPolygon:
    return as_multipolygon(unary_union(list(geoms))) if geoms else EMPTY


def board_cuts(board: Board, footprint: Footprint, layout: Layout) -> BoardCut:
    """The footprint's rule areas, copper polygons and copper zones per copper layer, as ``PlaneCut`` objects.

    Floating cells: the rule areas cover patch and slot, the polygons are the patches.
    Bridged cells: the rule areas cover the slot only and a copper zone holds patch and
    bridges; the copper an opening by the bridge width removes is the bridges.
    The slot is clipped to the plane zones of the plane's net on that layer, where any
    exist: the plane copper is what a trace's return current can lose.
    """
    spec = layout.spec
    a, b = footprint.span
    own = [z for z in board.zones if a <= z.span[0] and z.span[1] <= b]
    areas: dict[str, list] = {}
    copper: dict[str, list] = {}
    for zone in own:
        if zone.is_rule_area and zone.keepout.get("copperpour"):
            continue
        for layer in zone.layers:
            (areas if zone.is_rule_area else copper).setdefault(layer, []).append(zone.outline)
    for item in footprint.polygons:
        copper.setdefault(item.layer, []).append(item.polygon)
    cuts = []
    for layer in spec.plane_layers:
        metal = _union(copper.get(layer, []))
        outline = _union(areas.get(layer, []) + [metal])
        slot = outline.difference(metal)
        planes = [z.outline for z in board.zones if z.footprint is None and not z.is_rule_area
                  and z.net_name == spec.plane_net and layer in z.layers]
        if planes:
            slot = slot.intersection(unary_union(planes))
        patch, bridge = metal, EMPTY
        if spec.style == "bridged":
            half = spec.bridge_width / 2 + SLIVER_MM
            body = metal.buffer(-half, join_style="mitre").buffer(half, join_style="mitre")
            bridge = _union(_regions(metal.difference(body)))
            patch = metal.difference(bridge)
        cuts.append(PlaneCut(layer, as_multipolygon(slot), as_multipolygon(patch), as_multipolygon(bridge), outline))
    elsewhere = {layer: _union(areas.get(layer, []) + copper.get(layer, []))
                 for layer in sorted(set(areas) | set(copper)) if layer not in spec.plane_layers}
    return BoardCut(tuple(cuts), elsewhere)


def _regions(geom) -> list:
    """The parts of a difference wider than ``SLIVER_MM``, largest first."""
    parts = [g for g in getattr(geom, "geoms", [geom]) if g.area > 0
             and not g.buffer(-SLIVER_MM / 2, join_style="mitre").is_empty]
    return sorted(parts, key=lambda g: -g.area)


def _report(result: RuleResult, layer: str, region, what: str) -> None:
    """Each part of ``region`` wider than a sliver as an error at a point inside it, with its area."""
    for part in _regions(region):
        at = part.representative_point()
        result.see(part.area, lower_is_worse=False)
        result.add("error", f"{layer}: {part.area:.4g} mm2 {what}", (at.x, at.y), round(part.area, 6), 0.0, layer)


def placed_results(design: Layout, layout: Layout, footprint: Footprint, origin: tuple[float, float],
                   board_cut: BoardCut) -> tuple[RuleResult, RuleResult, RuleResult]:
    """`placed-slot`, `placed-copper` and `placed-footprint`: the board's cut against the stored ``design``.

    ``layout`` is the re-checked layout (board cuts, board traces); ``origin`` is where
    the footprint was placed (``footprint.footprint_origin`` of the design).  Designed
    slot that lost its rule area is not simply filled: KiCad then keeps its pour off the
    patch by its clearances (tests/test_kicad_recheck.py saw a wider gap than designed),
    so the message says the design no longer sets it.
    """
    slot = RuleResult("placed-slot", unit="mm2", limit=0.0)
    metal = RuleResult("placed-copper", unit="mm2", limit=0.0)
    for designed, cut in zip(design.cuts, board_cut.cuts):
        slot.checked += 1
        metal.checked += 1
        copper = unary_union([cut.patch, cut.bridge])
        lost = designed.slot.difference(cut.slot)
        _report(slot, cut.layer, lost.intersection(copper),
                "of the designed slot is covered by patch copper on the board (patch enlarged or moved)")
        _report(slot, cut.layer, lost.difference(copper),
                "of the designed slot lies outside the filter's rule areas or plane on the board (rule area removed "
                "or edited, or footprint moved): KiCad's pour there follows its clearances, not the design")
        _report(slot, cut.layer, cut.slot.difference(designed.slot),
                "cut on the board outside the designed slot (slot widened or moved)")
        designed_copper = unary_union([designed.patch, designed.bridge])
        _report(metal, cut.layer, designed_copper.difference(copper),
                "of the designed patch copper is missing on the board (patch removed, changed or moved)")
        _report(metal, cut.layer, copper.difference(designed_copper),
                "of patch copper on the board where the design has none (patch changed or moved)")
    return slot, metal, _pose(design, layout, footprint, origin, board_cut)


def _pose(design: Layout, layout: Layout, footprint: Footprint, origin: tuple[float, float],
          board_cut: BoardCut) -> RuleResult:
    r = RuleResult("placed-footprint", checked=1, unit="mm", limit=0.0)
    at, ref = footprint.at, footprint.reference
    moved = math.dist(at, origin)
    r.see(moved, lower_is_worse=False)
    if moved > MOVE_MM:
        r.add("error", f"{ref} moved {moved:.4g} mm from ({origin[0]:g}, {origin[1]:g}), where it was placed, to "
              f"({at[0]:g}, {at[1]:g})", at, round(moved, 6), 0.0)
    turn = (footprint.rotation + 180) % 360 - 180
    if abs(turn) > 1e-6:
        r.add("error", f"{ref} is turned by {turn:g} deg; it was placed at 0 deg", at, turn, 0.0)
    if footprint.layer != "F.Cu":
        r.add("error", f"{ref} is flipped to {footprint.layer}; it was placed on F.Cu", at)
    for layer, geom in board_cut.elsewhere.items():
        where = geom.representative_point()
        r.add("error", f"{ref} cuts {layer}, which the design ({', '.join(design.spec.plane_layers)}) does not cut",
              (where.x, where.y), layer=layer)
    for cut in layout.cuts:
        if cut.outline.is_empty:
            r.add("error", f"{ref} has no cut left on {cut.layer}", at, layer=cut.layer)
        elif not all(shapely.intersects(cut.outline, t.polygon) for t in layout.traces):
            where = cut.outline.representative_point()
            r.add("error", f"{cut.layer}: the cut of {ref} is no longer under the pair", (where.x, where.y),
                  layer=cut.layer)
    return r
