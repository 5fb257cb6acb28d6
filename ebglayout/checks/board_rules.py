"""Rules that look past the cut: where it sits on the board (inside the plane outline, in both of a stripline's
reference planes), the other nets' tracks and vias around it, and whether its notch lands on the target.
"""
from __future__ import annotations

import math

import numpy as np
import shapely

from ..layout import Layout
from ..physics import tm10_hz
from ..spec import FilterSpec
from .context import CheckContext, RuleResult, shown


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
