"""The rule set.  Each rule reads the Layout (and the board context) and returns a RuleResult.

Every number is measured on the polygons the engine built or the board holds,
never taken from the spec's intent; the spec only supplies the limits.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import shapely
from shapely.affinity import affine_transform
from shapely.geometry import Polygon
from shapely.ops import unary_union

from ..crossing import TOUCH_MM, Crossing
from ..layout import Layout, effective_permittivity, skew_ps
from ..physics import tm10_hz
from ..spec import FilterSpec, TrackObstacle, ViaObstacle
from ..units import format_length
from . import Finding
from .widths import width_check


@dataclass(frozen=True)
class Rule:
    """A rule's stable id, what it checks, its default limit and where that limit comes from."""

    id: str
    title: str
    limit: str
    source: str


RULES: tuple[Rule, ...] = (
    Rule("crossing-count", "each trace fully crosses slots; P and N counts equal and pair up slot by slot; "
         "count = rules.crossings, else >= rules.min_crossings", "min_crossings = 2",
         "common practice: one cell gives two crossings per trace; P/N symmetry keeps the cut from converting modes"),
    Rule("crossing-along", "no trace runs along a slot or ends inside one", "0 mm inside",
         "common practice: a trace over a slot edge has no defined return path"),
    Rule("crossing-angle", "angle between trace and slot edge at every crossing", "min_angle = 80 deg",
         "common practice: cross slots at right angles so both traces see the same gap"),
    Rule("corner-margin", "distance from each crossing trace to the nearest patch corner", "corner_margin = 0.4 mm",
         "common practice: fields crowd at patch corners; keep crossings several dielectric heights away"),
    Rule("crossing-symmetry", "P and N cross each slot at the same arc length; reported as skew",
         "symmetry = 0.005 mm", "common practice: any P/N offset at a slot converts differential to common mode"),
    Rule("slot-width", "every slot at least the fab's minimum etch gap", "min_slot = 0.1 mm",
         "typical fab capability for inner-layer etch of 1/2 oz copper (from memory; ask your fab)"),
    Rule("copper-width", "every copper neck (patch, bridge, web) at least the fab's minimum", "min_copper = 0.1 mm",
         "typical fab capability for inner-layer features of 1/2 oz copper (from memory; ask your fab)"),
    Rule("bridge-keepout", "no bridge closer to a trace than the keep distance", "bridge_keep = 3 x h",
         "common practice: the return current spreads about three dielectric heights either side of a trace"),
    Rule("bridge-symmetry", "bridges mirror-symmetric about the pair in every cell", "exact",
         "common practice: asymmetric bridges load P and N differently"),
    Rule("cell-overlap", "patches do not overlap; slots merge only when web = 0 was asked", "no overlap",
         "geometry: overlapping cells are not the drawn filter"),
    Rule("plane-edge", "every cell inside the plane outline and away from its edge", "edge_clearance = 0.5 mm",
         "common practice: a cut near the plane edge couples to the board-edge resonance"),
    Rule("stripline-cut", "a pair between two planes has the cut in both, aligned (patch overlap >= 95 %); the two cut "
         "planes lie one on each side of the pair (board: they are its nearest planes; no board: by KiCad's layer "
         "order)", "95 %",
         "common practice: with one plane left solid the return current takes it and the notch mostly vanishes"),
    Rule("foreign-track", "no other net's track referenced to the cut plane crosses a slot or runs over a patch", "none",
         "common practice: a track over a slot or a floating patch loses its return path"),
    Rule("foreign-via", "no via or pad through a floating patch (error) or near a slot (warning)",
         "one via diameter from slots", "common practice: a plane-net via shorts a floating patch; any other needs an antipad"),
    Rule("fold-skew", "P/N length difference through the filter, as delay", "skew_limit_ps = 1 ps",
         "common practice: keep intra-pair skew a small fraction of the unit interval"),
    Rule("kicad-fill", "(boards only) settings that would keep KiCad's pour from reproducing the cut: missing or "
         "overridden rule, plane min width above a web, zone priorities, unfilled or hatched planes", "none",
         "measured with the zone filler of KiCad 6.0.11 and 9.0.2 (tests/test_kicad_fill.py)"),
    Rule("placed-slot", "(boards only) the slots on the board, read from the filter footprint's rule areas and copper, "
         "are the stored design's: every designed slot inside the rule areas and clear of patch copper, nothing cut "
         "beyond it", "0 mm2 differing",
         "geometry: the design that was checked when placed is the reference (differences under 1 um are rounding)"),
    Rule("placed-copper", "(boards only) the patch and bridge copper on the board (footprint polygons and copper zones) "
         "is the stored design's: no patch removed, edited or moved", "0 mm2 differing",
         "geometry: the design that was checked when placed is the reference (differences under 1 um are rounding)"),
    Rule("placed-footprint", "(boards only) the filter footprint sits where it was placed: same position, rotation 0, "
         "front side, a cut on each of the design's plane layers and no other, under the pair", "0 mm moved",
         "geometry: a moved, turned or flipped footprint takes its cut away from the pair it was designed for"),
    Rule("notch-target", "the model's guaranteed stopband covers the target +- its margin at every tolerance corner "
         "(light check without the model: target within target_tolerance of the cells' notch spread)",
         "target_margin = 0.5 %",
         "circuit model: coupled lines (Hammerstad-Jensen, Kirschning-Jansen, Cohn) and the cavity's modal expansion "
         "(Okoshi); light check: cavity model of a rectangular patch (C. A. Balanis, Antenna Theory, 3rd ed., "
         "sec. 14.2.2, from memory)"),
)
RULE_BY_ID = {r.id: r for r in RULES}


@dataclass
class RuleResult:
    """Outcome of one rule: how many places it looked at, what it found, and the worst value against its limit."""

    rule: str
    checked: int = 0
    findings: list[Finding] = field(default_factory=list)
    worst: float | None = None
    limit: float | None = None
    unit: str = ""
    note: str = ""

    def add(self, severity: str, message: str, at, value=None, limit=None, layer: str = "") -> None:
        self.findings.append(Finding(self.rule, severity, message, (float(at[0]), float(at[1])), value, limit, layer))

    def see(self, value: float, lower_is_worse: bool = True) -> None:
        if self.worst is None or (value < self.worst if lower_is_worse else value > self.worst):
            self.worst = value


@dataclass(frozen=True)
class CheckContext:
    """What the checks know beyond the layout: other copper, the plane outline, the stack-up, the notch estimate.

    ``sandwiched`` is True when the pair's layer has a plane on each side (from the
    board stack-up), False when it has one, None when unknown (spec only).
    """

    tracks: tuple[TrackObstacle, ...] = ()
    vias: tuple[ViaObstacle, ...] = ()
    plane_outline: Polygon | None = None
    sandwiched: bool | None = None
    references: dict[str, tuple[str, ...]] | None = None
    """Signal layer -> plane layers it is referenced to; None = infer from layer names."""
    copper_layers: tuple[str, ...] | None = None
    """The board's copper layers top to bottom; None = KiCad's order by name (F.Cu, In1.Cu..In30.Cu, B.Cu)."""
    pair_planes: tuple[str, ...] | None = None
    """The board's nearest planes (any net) above and below the pair, under the pair; None = no board."""
    estimate: object = None
    """The notch estimate (ebglayout.estimate), when one was made."""


def context_from_spec(spec: FilterSpec) -> CheckContext:
    outline = Polygon(spec.plane_outline) if spec.plane_outline else None
    return CheckContext(tracks=spec.track_obstacles, vias=spec.via_obstacles, plane_outline=outline)


def _paired(layout: Layout, layer: str) -> tuple[list[Crossing], list[Crossing]]:
    p = sorted(layout.full_crossings(layer, "P"), key=lambda c: c.s_centre)
    n = sorted(layout.full_crossings(layer, "N"), key=lambda c: c.s_centre)
    return p, n


def shown(layout: Layout, mm: float, power: int = 1, sign: bool = False) -> str:
    """A length (``power`` 2: an area) in the spec's units, with the unit written: text for people."""
    return format_length(mm, layout.spec.units, power=power, sign=sign)


def expected_crossings(spec: FilterSpec) -> int:
    """Full crossings per trace the style implies: 2 per cell, or count + 1 with shared slots, times the passes."""
    per_pass = spec.count + 1 if spec.web == 0 else 2 * spec.count
    return per_pass * spec.passes


def crossing_count(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("crossing-count", unit="")
    required = spec.crossings if spec.crossings is not None else spec.min_crossings
    r.limit = float(required)
    for cut in layout.cuts:
        p, n = _paired(layout, cut.layer)
        r.checked += 1
        r.see(float(min(len(p), len(n))))
        at = (p or n or [None])[0]
        where = at.point if at else layout.cells[0].centre
        if len(p) != len(n):
            r.add("error", f"{cut.layer}: P crosses {len(p)} slots, N crosses {len(n)}", where, len(p) - len(n), 0, cut.layer)
        for cp, cn in zip(p, n):
            if set(cp.bodies) != set(cn.bodies):
                r.add("error", f"{cut.layer}: P crosses {'/'.join(cp.bodies)} where N crosses {'/'.join(cn.bodies)}",
                      cp.point, layer=cut.layer)
        count = min(len(p), len(n))
        if spec.crossings is not None and count != spec.crossings:
            r.add("error", f"{cut.layer}: {count} full crossings per trace, rules.crossings asks for {spec.crossings}",
                  where, count, spec.crossings, cut.layer)
        elif spec.crossings is None and count < spec.min_crossings:
            r.add("error", f"{cut.layer}: {count} full crossings per trace, fewer than rules.min_crossings = "
                  f"{spec.min_crossings}", where, count, spec.min_crossings, cut.layer)
        implied = expected_crossings(spec)
        if count != implied and spec.crossings is None and count >= spec.min_crossings:
            r.add("warning", f"{cut.layer}: {count} full crossings per trace; the {spec.style} style with these "
                  f"cells implies {implied}", where, count, implied, cut.layer)
    return r


def crossing_along(layout: Layout, ctx: CheckContext) -> RuleResult:
    r = RuleResult("crossing-along", unit="mm", limit=0.0)
    for c in layout.crossings:
        r.checked += 1
        if c.kind == "along":
            r.see(c.length, lower_is_worse=False)
            r.add("error", f"{c.layer}: trace {c.polarity} runs {shown(layout, c.length)} inside a slot and leaves onto the "
                  f"copper it came from ({c.bodies[0]})", c.point, c.length, 0.0, c.layer)
        elif c.kind == "ends":
            r.see(c.length, lower_is_worse=False)
            r.add("error", f"{c.layer}: trace {c.polarity} ends inside a slot ({shown(layout, c.length)} inside)",
                  c.point, c.length, 0.0, c.layer)
    return r


def _least_at_full_crossings(layout: Layout, rule: str, unit: str, limit: float, value, describe, show) -> RuleResult:
    """A lower-bound rule evaluated at every full crossing: ``value(c)`` must stay >= ``limit`` (``show`` writes
    a value with its unit)."""
    r = RuleResult(rule, unit=unit, limit=limit)
    for c in layout.crossings:
        v = value(c)
        if c.kind != "full" or not math.isfinite(v):
            continue
        r.checked += 1
        r.see(v)
        if v < limit - 1e-6:
            r.add("error", f"{c.layer}: trace {c.polarity} {describe(show(v))} (min {show(limit)})", c.point, v, limit,
                  c.layer)
    return r


def crossing_angle(layout: Layout, ctx: CheckContext) -> RuleResult:
    return _least_at_full_crossings(layout, "crossing-angle", "deg", layout.spec.min_angle, lambda c: c.angle_deg,
                                    lambda v: f"crosses a slot edge at {v}", lambda v: f"{v:.1f} deg")


def corner_margin(layout: Layout, ctx: CheckContext) -> RuleResult:
    return _least_at_full_crossings(layout, "corner-margin", "mm", layout.spec.corner_margin,
                                    lambda c: c.corner_distance, lambda v: f"crosses {v} from a patch corner",
                                    lambda v: shown(layout, v))


def crossing_symmetry(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("crossing-symmetry", unit="mm", limit=spec.symmetry)
    er_eff = effective_permittivity(spec)
    for cut in layout.cuts:
        p, n = _paired(layout, cut.layer)
        for cp, cn in zip(p, n):
            r.checked += 1
            offset = abs(cp.s_centre - cn.s_centre)
            r.see(offset, lower_is_worse=False)
            if offset > spec.symmetry + 1e-6:
                r.add("error", f"{cut.layer}: P and N cross this slot {shown(layout, offset)} apart along the pair "
                      f"(~{skew_ps(offset, er_eff):.3g} ps of skew; max {shown(layout, spec.symmetry)})",
                      cp.point, offset, spec.symmetry, cut.layer)
    return r


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


def plane_edge(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("plane-edge", unit="mm", limit=spec.edge_clearance)
    if ctx.plane_outline is None:
        r.note = "no plane outline given"
        return r
    edge = ctx.plane_outline.exterior
    for cell in layout.cells:
        r.checked += 1
        inside = ctx.plane_outline.contains(cell.outer)
        distance = cell.outer.distance(edge) if inside else 0.0
        r.see(distance)
        if not inside:
            r.add("error", f"cell {cell.index} is not inside the plane outline", cell.centre, 0.0, spec.edge_clearance)
        elif distance < spec.edge_clearance - 1e-6:
            r.add("error", f"cell {cell.index} is {shown(layout, distance)} from the plane edge "
                  f"(min {shown(layout, spec.edge_clearance)})",
                  cell.centre, distance, spec.edge_clearance)
    return r


def stripline_cut(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("stripline-cut", unit="%", limit=95.0)
    centre = layout.cells[0].centre
    if len(layout.cuts) == 1:
        r.checked += 1
        if ctx.sandwiched:
            r.add("error", f"the pair on {spec.pair_layer} has planes on both sides but only {layout.cuts[0].layer} "
                  "is cut: the return current takes the solid plane and the notch mostly vanishes", centre)
        elif ctx.sandwiched is None and spec.pair_layer.startswith("In"):
            r.add("warning", f"the pair is on inner layer {spec.pair_layer} and only {layout.cuts[0].layer} is cut; "
                  "if it is referenced to planes on both sides, cut both", centre)
        return r
    r.checked += 1
    sides = {_side(cut.layer, spec.pair_layer, ctx) for cut in layout.cuts}
    names = " and ".join(cut.layer for cut in layout.cuts)
    if len(sides) == 1 and not math.isnan(next(iter(sides))):
        r.add("error", f"{names} both lie {'below' if sides == {1.0} else 'above'} {spec.pair_layer}: a stripline "
              "cut belongs in the pair's two reference planes, one above and one below", centre)
    if ctx.pair_planes is not None and set(ctx.pair_planes) != {cut.layer for cut in layout.cuts}:
        r.add("error", f"the planes next to {spec.pair_layer} under the pair are "
              f"{' and '.join(ctx.pair_planes) or 'none'}, not {names}", centre)
    first = layout.cuts[0]
    for other in layout.cuts[1:]:
        r.checked += 1
        overlap = first.patch.intersection(other.patch).area
        base = max(first.patch.area, other.patch.area)
        ratio = 100.0 * overlap / base if base else 0.0
        r.see(ratio)
        if ratio < 95.0 - 1e-9:
            r.add("error", f"patches on {first.layer} and {other.layer} overlap {ratio:.1f} % (min 95 %)", centre,
                  ratio, 95.0, other.layer)
    return r


def _layer_index(name: str) -> float:
    if name == "F.Cu":
        return 0.0
    if name == "B.Cu":
        return math.inf
    if name.startswith("In") and name.endswith(".Cu") and name[2:-3].isdigit():
        return float(name[2:-3])
    return math.nan


def _side(plane: str, pair_layer: str, ctx: CheckContext) -> float:
    """+1 when ``plane`` lies below ``pair_layer``, -1 above, nan when the order is unknown."""
    if ctx.copper_layers is not None:
        order = ctx.copper_layers
        if plane not in order or pair_layer not in order:
            return math.nan
        a, b = order.index(plane), order.index(pair_layer)
    else:
        a, b = _layer_index(plane), _layer_index(pair_layer)
    return math.nan if math.isnan(a - b) or a == b else math.copysign(1.0, a - b)


def _references(layer: str, spec: FilterSpec, ctx: CheckContext) -> list[str]:
    """Cut planes a signal layer is referenced to."""
    if ctx.references is not None:
        return [p for p in ctx.references.get(layer, ()) if p in spec.plane_layers]
    if layer == spec.pair_layer:
        return list(spec.plane_layers)
    i = _layer_index(layer)
    return [p for p in spec.plane_layers if abs(_layer_index(p) - i) == 1]


def _segment_bodies(track) -> np.ndarray:
    """The track's copper as one round-capped body per segment: together the track's round-joined outline, without
    the cost of buffering a long zig-zag as one line (whose overlapping joins GEOS resolves in quadratic time)."""
    points = np.asarray(track.points, dtype=float)
    segments = shapely.linestrings(np.stack([points[:-1], points[1:]], axis=1))
    return shapely.buffer(segments, track.width / 2, cap_style="round")


def _overlap(bodies: np.ndarray, region):
    """Where the first body (along the track) that overlaps ``region`` does so (empty when none does)."""
    hits = np.flatnonzero(shapely.intersects(bodies, region))
    return bodies[hits[0]].intersection(region) if len(hits) else shapely.Polygon()


def foreign_track(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("foreign-track", unit="mm", limit=0.0)
    own = set(spec.nets)
    for track in ctx.tracks:
        if track.net and track.net in own:
            continue
        planes = _references(track.layer, spec, ctx)
        if not planes:
            continue
        bodies = _segment_bodies(track)
        for layer in planes:
            cut = layout.cut(layer)
            r.checked += 1
            over_slot = _overlap(bodies, cut.slot)
            over_patch = _overlap(bodies, cut.patch)
            if not over_slot.is_empty:
                at = over_slot.representative_point()
                r.add("error", f"{track.layer} track {track.net or '(no net)'} crosses a slot of {layer}",
                      (at.x, at.y), layer=layer)
            elif not over_patch.is_empty:
                at = over_patch.representative_point()
                r.add("error", f"{track.layer} track {track.net or '(no net)'} runs over a patch of {layer}",
                      (at.x, at.y), layer=layer)
    return r


def foreign_via(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("foreign-via", unit="mm", limit=0.0)
    floating = spec.style != "bridged"
    if not ctx.vias:
        return r
    disks = shapely.buffer(shapely.points([v.at for v in ctx.vias]), [v.diameter / 2 for v in ctx.vias], quad_segs=16)
    measured = [(cut, shapely.intersects(disks, cut.patch), shapely.distance(disks, cut.slot)) for cut in layout.cuts]
    for k, via in enumerate(ctx.vias):
        for cut, through, gaps in measured:
            r.checked += 1
            if through[k]:
                severity = "error" if floating else "warning"
                why = ("a plane-net via shorts a floating patch" if via.net == spec.plane_net
                       else "it needs an antipad that reshapes the patch")
                r.add(severity, f"{cut.layer}: via/pad {via.net or '(no net)'} through a patch: {why}", via.at, layer=cut.layer)
            elif gaps[k] < via.diameter:
                gap = float(gaps[k])
                r.see(gap)
                r.add("warning", f"{cut.layer}: via/pad {via.net or '(no net)'} {shown(layout, gap)} from a slot", via.at,
                      gap, via.diameter, cut.layer)
    return r


def fold_skew(layout: Layout, ctx: CheckContext) -> RuleResult:
    """P/N length difference between the first and last slot crossing, from the measured crossing positions."""
    spec = layout.spec
    r = RuleResult("fold-skew", unit="ps", limit=spec.skew_limit_ps)
    cut = layout.cuts[0]
    p, n = _paired(layout, cut.layer)
    if len(p) < 2 or len(p) != len(n):
        return r
    p_span = p[-1].s_trace - p[0].s_trace
    n_span = n[-1].s_trace - n[0].s_trace
    diff = round(p_span - n_span, 6) + 0.0
    er_eff = effective_permittivity(spec)
    ps = skew_ps(diff, er_eff)
    r.checked += 1
    r.see(ps, lower_is_worse=False)
    turns = len(layout.turns)
    r.note = (f"P-N length through the filter {shown(layout, diff, sign=True)} ({ps:.3g} ps)"
              + (f"; {turns} U-turns alternating, {shown(layout, abs(layout.turns[0].p_minus_n))} each" if turns else ""))
    if ps > spec.skew_limit_ps + 1e-9:
        r.add("error", f"P-N length difference through the filter {shown(layout, diff, sign=True)} = {ps:.3g} ps "
              f"(max {spec.skew_limit_ps:g} ps)", p[0].point, ps, spec.skew_limit_ps)
    return r


def notch_target(layout: Layout, ctx: CheckContext) -> RuleResult:
    """With the circuit model: its guaranteed stopband (rejected at every tolerance corner) must hold the target
    with its margin.  Without it (re-checks of a board): the light check, the cells' notch spread against the
    target, or f10 = c / (2 a sqrt(er)) per cell within rules.target_tolerance."""
    spec = layout.spec
    r = RuleResult("notch-target", unit="%", limit=100 * spec.target_tolerance)
    if spec.target_hz is None:
        r.note = "no target given"
        return r
    model = getattr(ctx.estimate, "rejection", None) if ctx.estimate is not None else None
    if model is not None:
        data = model.to_json()
        r.checked += 1
        r.unit, r.limit = "%", 100 * spec.target_margin
        low, high = spec.target_hz * (1 - spec.target_margin), spec.target_hz * (1 + spec.target_margin)
        bands = data["tolerance"]["guaranteed_stopband_hz"]
        # how much of target +- margin the nearest guaranteed band leaves uncovered, in % of the target
        short = min((100 * (max(0.0, a - low) + max(0.0, high - b)) / spec.target_hz for a, b in bands),
                    default=100.0)
        r.see(short, lower_is_worse=False)
        level = f"{spec.rejection_db:g} dB"
        text = ", ".join(f"{a / 1e9:.4g}-{b / 1e9:.4g} GHz" for a, b in bands) or "none"
        r.note = f"model's guaranteed stopband at {level} over the nominal and {len(data['tolerance']['corners']) - 1} corners: {text}"
        if not data["target_covered"]:
            r.add("warning", f"the model's guaranteed stopband at {level} ({text}) does not cover the target "
                  f"{spec.target_hz / 1e9:.4g} GHz +-{spec.target_margin:.1%} at every tolerance corner (circuit "
                  "model, not a full-wave run; confirm with one and a measurement)", layout.cells[0].centre, short,
                  100 * spec.target_margin)
        return r
    if ctx.estimate is not None:
        est = ctx.estimate.to_json()
        low, high = est["notch_spread"]["low_hz"], est["notch_spread"]["high_hz"]
        r.checked += 1
        off = 0.0 if low <= spec.target_hz <= high else 100 * min(abs(spec.target_hz / low - 1), abs(spec.target_hz / high - 1))
        r.see(off, lower_is_worse=False)
        r.note = f"cell notch spread {low / 1e9:.3g} to {high / 1e9:.3g} GHz over the er/h sweep (light check)"
        if off > 100 * spec.target_tolerance:
            r.add("warning", f"target {spec.target_hz / 1e9:.3g} GHz is {off:.0f} % outside the cells' notch spread "
                  f"{low / 1e9:.3g} to {high / 1e9:.3g} GHz over the er/h tolerance sweep (estimate; confirm with a "
                  "field solve)", layout.cells[0].centre, off, 100 * spec.target_tolerance)
        return r
    if spec.style == "bridged":
        r.note = "bridged cells resonate below their cavity mode; see the estimate"
        return r
    for cell in layout.cells:
        r.checked += 1
        rect = cell.patch.minimum_rotated_rectangle
        xy = np.asarray(rect.exterior.coords)
        longest = max(np.linalg.norm(xy[1] - xy[0]), np.linalg.norm(xy[2] - xy[1]))
        f10 = tm10_hz(longest, spec.er)
        off = 100 * (f10 / spec.target_hz - 1)
        r.see(abs(off), lower_is_worse=False)
        if abs(off) > 100 * spec.target_tolerance:
            r.add("warning", f"cell {cell.index}: fundamental cavity mode {f10 / 1e9:.3g} GHz is {off:+.0f} % from "
                  f"the target {spec.target_hz / 1e9:.3g} GHz (estimate; confirm with a field solve)",
                  cell.centre, abs(off), 100 * spec.target_tolerance)
    return r


RULE_FUNCTIONS = (
    crossing_count, crossing_along, crossing_angle, corner_margin, crossing_symmetry, slot_width, copper_width,
    bridge_keepout, bridge_symmetry, cell_overlap, plane_edge, stripline_cut, foreign_track, foreign_via, fold_skew,
    notch_target,
)
