"""Rules on the cut's own geometry: slot and copper widths against the fab's minimums, bridges kept off the
traces and mirror-symmetric about the pair, and cells that neither overlap nor merge their slots.
"""
from __future__ import annotations

import math

import shapely
from shapely.affinity import affine_transform
from shapely.ops import unary_union

from ..crossing import TOUCH_MM
from ..layout import Layout
from .context import CheckContext, RuleResult, shown
from .widths import width_check


def slot_width(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("slot-width", unit="mm", limit=spec.min_slot)
    for cut in layout.cuts:
        r.checked += len(cut.slot.geoms)
        narrow, places = width_check(cut.slot, spec.min_slot)
        if narrow:
            r.see(narrow.width)
        for place in places:
            r.add("error", f"{cut.layer}: slot {shown(layout, place.width)} wide (min {shown(layout, spec.min_slot)})",
                  place.at, place.width, spec.min_slot, cut.layer)
    return r


COPPER_MARGIN_MM = 1.0
"""Plane kept around a cut for the copper-width check; wider than any fab minimum, so its outer edge never flags."""


def cut_copper(cut) -> shapely.Geometry:
    """Copper around and inside a cut: a margin of plane around the outline, minus the slots."""
    around = cut.outline.buffer(COPPER_MARGIN_MM, join_style="mitre")
    return around.difference(cut.slot)


def copper_width(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("copper-width", unit="mm", limit=spec.min_copper)
    for cut in layout.cuts:
        copper = cut_copper(cut)
        r.checked += len(getattr(copper, "geoms", [copper]))
        narrow, places = width_check(copper, spec.min_copper)
        if narrow:
            r.see(narrow.width)
        for place in places:
            r.add("error", f"{cut.layer}: copper neck {shown(layout, place.width)} wide "
                  f"(min {shown(layout, spec.min_copper)})",
                  place.at, place.width, spec.min_copper, cut.layer)
    return r


def bridge_keepout(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("bridge-keepout", unit="mm", limit=spec.bridge_keep)
    traces = [t.polygon for t in layout.traces]
    for cut in layout.cuts:
        for bridge in cut.bridge.geoms:
            r.checked += 1
            distance = min(bridge.distance(t) for t in traces)
            r.see(distance)
            if distance < spec.bridge_keep - 1e-6:
                c = bridge.centroid
                r.add("error", f"{cut.layer}: bridge {shown(layout, distance)} from a trace "
                      f"(keep {shown(layout, spec.bridge_keep)})",
                      (c.x, c.y), distance, spec.bridge_keep, cut.layer)
    return r


def bridge_symmetry(layout: Layout, ctx: CheckContext) -> RuleResult:
    r = RuleResult("bridge-symmetry", unit="mm2", limit=0.0)
    for cut in layout.cuts:
        bridges = unary_union(list(cut.bridge.geoms))
        if bridges.is_empty:
            continue
        for cell in layout.cells:
            local = bridges.intersection(cell.outer)
            if local.is_empty:
                continue
            r.checked += 1
            mirrored = _mirror(local, cell.centre, math.radians(cell.rotation_deg))
            mismatch = local.symmetric_difference(mirrored).area
            r.see(mismatch, lower_is_worse=False)
            if mismatch > 1e-6:
                r.add("error", f"{cut.layer}: cell {cell.index} bridges are not mirror-symmetric about the pair "
                      f"({shown(layout, mismatch, power=2)} differ)", cell.centre, mismatch, 0.0, cut.layer)
    return r


def _mirror(geometry, centre, heading: float):
    """Reflect across the line through ``centre`` at ``heading``."""
    c2, s2 = math.cos(2 * heading), math.sin(2 * heading)
    x0, y0 = centre
    # p' = c + R (p - c) with R the reflection matrix [[c2, s2], [s2, -c2]]
    return affine_transform(geometry, [c2, s2, s2, -c2, x0 - c2 * x0 - s2 * y0, y0 - s2 * x0 + c2 * y0])


def cell_overlap(layout: Layout, ctx: CheckContext) -> RuleResult:
    """Every pair of cells is judged, but only pairs whose patches touch (an STRtree join) or that
    are neighbours in the row can give a finding, so only those are measured, in pair order."""
    spec = layout.spec
    r = RuleResult("cell-overlap", unit="mm", limit=spec.web)
    cells = layout.cells
    r.checked = len(cells) * (len(cells) - 1) // 2
    patches = [c.patch for c in cells]
    pairs = {(i, j) for i, j in shapely.STRtree(patches).query(patches, predicate="intersects").T.tolist() if i < j}
    positions: dict[int, list[int]] = {}
    for k, c in enumerate(cells):
        positions.setdefault(c.index, []).append(k)
    pairs |= {(min(k, m), max(k, m)) for k, c in enumerate(cells) for m in positions.get(c.index + 1, ())}
    for i, j in sorted(pairs):
        a, b = cells[i], cells[j]
        if a.patch.intersects(b.patch) and a.patch.intersection(b.patch).area > 1e-9:
            r.add("error", f"cells {a.index} and {b.index} overlap", a.centre)
            continue
        gap = a.outer.distance(b.outer)
        adjacent = abs(b.index - a.index) == 1
        if spec.web > 0 and adjacent:
            r.see(gap)
            if gap < spec.web - TOUCH_MM:  # each cell is snapped to the 1 nm grid on its own
                r.add("error", f"cells {a.index} and {b.index}: web {shown(layout, gap)} where cut.web = {shown(layout, spec.web)}; "
                      "their slots merge", b.centre, gap, spec.web)
    return r
