"""The preview as a drawing: title, one panel per distinct plane cut, legend, summary and notch chart, as one
list of primitives (``primitives.py``) in painting order; lengths are written in the spec's units.

A stripline's two planes normally carry the identical cut, so they share one panel titled with both layer names;
if the cuts ever differ (e.g. read from a board), each gets its own panel.  Finding rings and labels are placed by
``labels.py``, the axes, legends and notch chart come from ``chart.py``.
"""
from __future__ import annotations

import math
from typing import Sequence

import numpy as np
import shapely
from shapely.geometry import LineString, Point, Polygon, box

from ..layout import Layout, PlaneCut
from ..units import LENGTH_UNITS_MM, format_length
from . import CAUTION, CellFrame
from .chart import axes, legend_items, notch_items, ticks
from .labels import finding_marks, keep_inside, page_shape, trace_label
from .primitives import ANCHOR, CAP, COLOURS, TRACE_ALPHA, Fill, Markers, Polyline, Text, View, baseline, geometry_fill

MAIN_BOX = (80.0, 128.0, 1016.0, 818.0)
"""left, top, right, bottom (px) of the drawing panels; the right column holds legend, summary and notch plot."""
PANEL_GAP = 62.0
NOTCH_BOX = (1110.0, 657.0, 1411.0, 819.0)
LEGEND_AT = (1052.0, 118.0)
SUMMARY_AT = (1050.0, 398.0)


def build_drawing(layout: Layout, findings: Sequence = (), notch: dict | None = None, tracks=None,
                  vias=None) -> list:
    """The preview as a list of primitives, in painting order.  ``tracks`` and ``vias`` are the other copper
    (default: the spec's obstacles; a board placement passes the board's)."""
    spec = layout.spec
    tracks = spec.track_obstacles if tracks is None else tracks
    vias = spec.via_obstacles if vias is None else vias
    items: list = [Text(29, 34, drawing_title(layout), 20, COLOURS["text"], bold=True),
                   Text(29, 74, _subtitle(layout), 15, COLOURS["text"])]
    groups = _cut_groups(layout.cuts)
    left, top, right, bottom = MAIN_BOX
    height = (bottom - top - PANEL_GAP * (len(groups) - 1)) / len(groups)
    x0, y0, x1, y1 = _view(layout, findings, (right - left) / height)
    scale = (right - left) / (x1 - x0)
    unlabelled = 0
    for k, group in enumerate(groups):
        view = View(x0, y0, x1, y1, left, top + k * (height + PANEL_GAP), scale)
        panel, left_out = _panel(layout, group, findings, view, (k == 0), tracks, vias)
        items += panel
        unlabelled += left_out
    items += legend_items(_legend_entries(layout, findings, tracks, vias), *LEGEND_AT, row=21.0, columns=1,
                          size=14.0)
    x, y = SUMMARY_AT
    for i, line in enumerate(_summary(layout, findings, unlabelled)):
        indent = len(line) - len(line.lstrip(" "))
        items.append(Text(x + 8 * indent, y + 16.5 * i, line.strip(), 13, COLOURS["text"], mono=True))
    if notch:
        items += notch_items(notch, NOTCH_BOX)
    items.append(Text(29, 884, "CAUTION: " + CAUTION, 14, COLOURS["caution"]))
    return items


def drawing_title(layout: Layout) -> str:
    spec = layout.spec
    counts = []
    for trace in layout.traces:
        per_layer = [len(layout.full_crossings(plane, trace.polarity)) for plane in spec.plane_layers]
        counts.append(f"{trace.polarity} {'/'.join(str(n) for n in per_layer)}")
    return f"{spec.name}: {spec.style}, {spec.count} cell(s), full slot crossings {', '.join(counts)}"


def _subtitle(layout: Layout) -> str:
    spec = layout.spec
    text = (f"pair on {spec.pair_layer}, cut in {', '.join(spec.plane_layers)}; board coordinates in {spec.units}; "
            f"slot {format_length(spec.slot, spec.units)}, web {format_length(spec.web, spec.units)}")
    if spec.target_hz:
        text += f"; notch target {spec.target_hz / 1e9:.2f} GHz"
    return text


def _cut_groups(cuts: Sequence[PlaneCut]) -> list[list[PlaneCut]]:
    """Plane cuts grouped by identical geometry (zero symmetric-difference area in every role)."""
    def same(a, b) -> bool:
        return a.equals_exact(b, 0.0) or a.symmetric_difference(b).area < 1e-12

    groups: list[list[PlaneCut]] = []
    for cut in cuts:
        for group in groups:
            if all(same(group[0].role(r), cut.role(r)) for r in ("slot", "patch", "bridge")):
                group.append(cut)
                break
        else:
            groups.append([cut])
    return groups


def _view(layout: Layout, findings: Sequence, aspect: float) -> tuple[float, float, float, float]:
    """Board window: the cut, the whole route and every finding, widened to the panel's aspect (1 mm = 1 mm)."""
    boxes = [c.outline.bounds for c in layout.cuts if not c.outline.is_empty]
    boxes += [t.polygon.bounds for t in layout.traces if not t.polygon.is_empty]
    xs = [f.at[0] for f in findings] + [b[0] for b in boxes] + [b[2] for b in boxes]
    ys = [f.at[1] for f in findings] + [b[1] for b in boxes] + [b[3] for b in boxes]
    x0, x1, y0, y1 = min(xs), max(xs), min(ys), max(ys)
    margin = max(1.0, 0.06 * max(x1 - x0, y1 - y0))
    x0, y0, x1, y1 = x0 - margin, y0 - margin, x1 + margin, y1 + margin
    w, h = x1 - x0, y1 - y0
    if w / h < aspect:
        grow = (h * aspect - w) / 2
        x0, x1 = x0 - grow, x1 + grow
    else:
        grow = (w / aspect - h) / 2
        y0, y1 = y0 - grow, y1 + grow
    return (x0, y0, x1, y1)


def _panel(layout: Layout, group: list[PlaneCut], findings: Sequence, view: View, dimensions: bool,
           tracks: Sequence = (), vias: Sequence = ()) -> tuple[list, int]:
    """One plane cut's panel; also the number of findings whose rule id found no free place to be written."""
    spec = layout.spec
    cut = group[0]
    layers = [c.layer for c in group]
    window = box(view.x0, view.y0, view.x1, view.y1)
    note = " (identical cut)" if len(layers) > 1 else ""
    items: list = [Text(view.left, view.top - 8, f"plane {' + '.join(layers)}{note}", 15, COLOURS["text"])]
    outline = None if spec.plane_outline is None else Polygon(spec.plane_outline)
    plane = window if outline is None else window.intersection(outline)
    edge = {"edge": COLOURS["edge"], "edge_px": 0.8}
    items += [geometry_fill(plane.difference(cut.outline), COLOURS["plane"], view, "plane"),
              geometry_fill(cut.slot, COLOURS["slot"], view, "slot", **edge),
              geometry_fill(cut.patch, COLOURS["patch"], view, "patch", **edge),
              geometry_fill(cut.bridge, COLOURS["bridge"], view, "bridge", **edge)]
    if outline is not None:
        rim = outline.exterior.intersection(window)
        for piece in getattr(rim, "geoms", [rim]):
            if piece.geom_type == "LineString" and not piece.is_empty:
                items.append(Polyline(np.asarray(piece.coords), COLOURS["edge"], 1.2, (6.0, 4.0), view, "outline"))
    copper = _other_copper(tracks, vias, window)
    items += [geometry_fill(copper["track"], COLOURS["track"], view, "track", alpha=TRACE_ALPHA),
              geometry_fill(copper["via"], COLOURS["via"], view, "via", edge=COLOURS["page"], edge_px=0.8)]
    for trace in layout.traces:
        hatch = COLOURS["hatch"] if trace.polarity == "N" else None
        items.append(geometry_fill(trace.polygon.intersection(window), COLOURS[trace.polarity], view,
                                   f"trace-{trace.polarity}", alpha=TRACE_ALPHA, hatch=hatch))
    net_labels = keep_inside(view, [t for t in (trace_label(trace, window, cut.outline, view)
                                                for trace in layout.traces) if t])
    items += net_labels
    here = [c for c in layout.crossings if c.layer == cut.layer]
    full = tuple(view.px(*c.point) for c in here if c.kind == "full")
    other = tuple(view.px(*c.point) for c in here if c.kind != "full")
    rim = None if _crowded(full + other, 6.0) else COLOURS["page"]
    if full:
        items.append(Markers(full, "dot", 6.0 if rim else 3.0, COLOURS["full"], rim, 0.8, "full"))
    if other:
        items.append(Markers(other, "x", 15.0 if rim else 9.0, COLOURS["other"], rim, 1.0, "other"))
    numbers = _cell_numbers(layout, view)
    items += numbers
    if dimensions and layout.cells and min(layout.cells[0].size) * view.scale >= 40.0:
        dims = _dimensions(layout, view)
        items += dims
        numbers = numbers + [d for d in dims if isinstance(d, Text)]
    units = spec.units
    rings, labels, left_out = finding_marks(_findings_for(findings, layers, spec.plane_layers), view,
                                            page_shape([t.polygon for t in layout.traces] + list(copper.values()),
                                                       view),
                                            [t.box() for t in net_labels + numbers])
    items += rings + labels
    scale = LENGTH_UNITS_MM[units]
    items += axes((view.left, view.top, view.right, view.bottom),
                  [(view.px(v * scale, 0)[0], s) for v, s in
                   ticks(view.x0 / scale, view.x1 / scale, (view.right - view.left) / 110)],
                  [(view.px(0, v * scale)[1], s) for v, s in
                   ticks(view.y0 / scale, view.y1 / scale, (view.bottom - view.top) / 80)],
                  f"x ({units})", f"y ({units})")
    return [i for i in items if i is not None], left_out


def _other_copper(tracks: Sequence, vias: Sequence, window) -> dict:
    """Other tracks (at their width, round ends) and vias/pads (at their diameter) inside the window."""
    shapes = {"track": [LineString(t.points).buffer(t.width / 2, quad_segs=8) for t in tracks if len(t.points) > 1],
              "via": [Point(v.at).buffer(v.diameter / 2, quad_segs=8) for v in vias]}
    return {role: shapely.union_all(parts).intersection(window) if parts else Polygon()
            for role, parts in shapes.items()}


def _cell_numbers(layout: Layout, view: View) -> list:
    """Each cell's index (as in the estimate, the findings and report.json) in its patch, a third of the way
    from the centre (where the pair runs) to the patch's left edge, where it fits."""
    size = 12.0
    fits = layout.cells and min(min(c.size) for c in layout.cells) * view.scale >= 2.8 * size
    if not fits:
        return []
    return [Text(x, y + CAP / 2 * size, str(c.index), size, COLOURS["cell"], bold=True, anchor="middle",
                 role="cell-number")
            for c in layout.cells for x, y in [view.px(*CellFrame(c).board(0.0, c.size[1] / 3))]]


def _crowded(points: tuple, size: float) -> bool:
    """True when markers in drawing order typically lie closer than their size (a long row seen whole): then they
    are drawn small and without their white rim, which would otherwise wipe out their neighbours."""
    if len(points) < 2:
        return False
    steps = np.sort(np.hypot(*np.diff(np.asarray(points), axis=0).T))
    return bool(steps[len(steps) // 2] < size)


def _findings_for(findings: Sequence, layers: list[str], plane_layers: Sequence[str]) -> list:
    """Findings on one of this panel's layers, or not tied to a plane layer, in a stable order."""
    mine = [f for f in findings if f.layer in layers or f.layer not in plane_layers]
    return sorted(mine, key=lambda f: (f.severity != "error", f.rule, f.at))


def _arrow(p: tuple[float, float], q: tuple[float, float], colour: str, start_head: bool = True,
           end_head: bool = True, head: float = 7.0, width: float = 1.3) -> list:
    """A page-space line from p to q with filled arrowheads at the chosen ends."""
    (px, py), (qx, qy) = p, q
    length = math.hypot(qx - px, qy - py) or 1.0
    ux, uy = (qx - px) / length, (qy - py) / length
    a = (px + ux * head * start_head, py + uy * head * start_head)
    b = (qx - ux * head * end_head, qy - uy * head * end_head)
    items: list = [Polyline(np.array([a, b]), colour, width, role="dimension")]
    for (tx, ty), sign, wanted in (((px, py), 1.0, start_head), ((qx, qy), -1.0, end_head)):
        if wanted:
            bx, by = tx + sign * ux * head, ty + sign * uy * head
            wx, wy = -uy * head * 0.36, ux * head * 0.36
            tri = np.array([(tx, ty), (bx + wx, by + wy), (bx - wx, by - wy)])
            items.append(Fill(tri, ((0, 3),), ((0, 1),), colour, role="dimension"))
    return items


def _alignment(outward: tuple[float, float], extend: tuple[float, float] = (0.0, 0.0)) -> tuple[str, str]:
    """Text alignment (board orientation) that puts text on the ``outward`` side of its anchor, running towards
    ``extend``."""
    ox, oy = outward
    ex, ey = extend
    ha = "left" if ox > 0.3 else "right" if ox < -0.3 else "center"
    va = "bottom" if oy > 0.3 else "top" if oy < -0.3 else "center"
    if ha == "center":
        ha = "left" if ex > 0.3 else "right" if ex < -0.3 else "center"
    if va == "center":
        va = "bottom" if ey > 0.3 else "top" if ey < -0.3 else "center"
    return ha, va


def _dim_text(view: View, at: tuple[float, float], outward: tuple[float, float], text: str,
              extend: tuple[float, float] = (0.0, 0.0), gap: float = 6.0) -> Text:
    """Dimension text just beside its anchor, on the side away from the cell, running towards ``extend``."""
    ha, va = _alignment(outward, extend)
    x, y = view.px(*at)
    size = 12.5
    return Text(x + gap * outward[0], baseline(y - gap * outward[1], va, size), text, size, COLOURS["dim"],
                anchor=ANCHOR[ha], halo=True)


def _dimensions(layout: Layout, view: View) -> list:
    """Patch along/across size on the first cell and a callout for the slot width."""
    cell = layout.cells[0]
    frame = CellFrame(cell)
    pu0, pv0, pu1, pv1 = frame.local_bounds(cell.patch)
    ou0, ov0, ou1, ov1 = frame.local_bounds(cell.outer)
    off = 0.35 * (pv1 - pv0)
    dim = COLOURS["dim"]
    units = layout.spec.units
    items = _arrow(view.px(*frame.board(pu0, ov0 - off)), view.px(*frame.board(pu1, ov0 - off)), dim)
    items.append(_dim_text(view, frame.board((pu0 + pu1) / 2, ov0 - off), frame.direction(0.0, -1.0),
                           format_length(pu1 - pu0, units)))
    items += _arrow(view.px(*frame.board(ou0 - off, pv0)), view.px(*frame.board(ou0 - off, pv1)), dim)
    items.append(_dim_text(view, frame.board(ou0 - off, pv1 - 0.25 * (pv1 - pv0)), frame.direction(-1.0, 0.0),
                           format_length(pv1 - pv0, units), extend=frame.direction(0.0, 1.0)))
    slot_at = view.px(*frame.board(pu0 + 0.2 * (pu1 - pu0), (pv1 + ov1) / 2))
    text_at = frame.board(pu0 + 0.2 * (pu1 - pu0), ov1 + off)
    tx, ty = view.px(*text_at)
    items += _arrow((tx, ty), slot_at, dim, start_head=False)
    items.append(_dim_text(view, text_at, frame.direction(0.0, 1.0), f"slot {format_length(ov1 - pv1, units)}",
                           gap=3.0))
    return items


def _legend_entries(layout: Layout, findings: Sequence, tracks: Sequence = (),
                    vias: Sequence = ()) -> list[tuple[str, tuple]]:
    """Legend entries for what this drawing actually shows: (label, swatch)."""
    edge = {"edge": COLOURS["edge"], "edge_px": 0.8}
    entries = [(f"plane copper ({layout.spec.plane_net})", ("rect", COLOURS["plane"], {})),
               ("slot (copper removed)", ("rect", COLOURS["slot"], edge)),
               ("patch", ("rect", COLOURS["patch"], edge))]
    if any(not cut.bridge.is_empty for cut in layout.cuts):
        entries.append(("bridge", ("rect", COLOURS["bridge"], edge)))
    if layout.spec.plane_outline is not None:
        entries.append(("plane outline", ("line", COLOURS["edge"], 1.2, (6.0, 4.0))))
    for trace in layout.traces:
        hatch = COLOURS["hatch"] if trace.polarity == "N" else None
        entries.append((f"{trace.polarity} trace {trace.net}",
                        ("rect", COLOURS[trace.polarity], {"alpha": TRACE_ALPHA, "hatch": hatch})))
    if tracks:
        entries.append(("other track", ("rect", COLOURS["track"], {"alpha": TRACE_ALPHA})))
    if vias:
        entries.append(("via / pad", ("marker", "dot", 11.0, COLOURS["via"], COLOURS["page"], 0.8)))
    entries.append(("full slot crossing", ("marker", "dot", 7.0, COLOURS["full"], COLOURS["page"], 0.8)))
    if any(c.kind != "full" for c in layout.crossings):
        entries.append(("along / ends in slot", ("marker", "x", 13.0, COLOURS["other"], COLOURS["page"], 1.0)))
    for severity in ("error", "warning"):
        if any(f.severity == severity for f in findings):
            entries.append((f"{severity} (rule id beside)", ("marker", "ring", 15.0, None, COLOURS[severity], 2.5)))
    return entries


def _summary(layout: Layout, findings: Sequence, unlabelled: int = 0) -> list[str]:
    """Short text block for the right column: crossings per trace and layer, finding counts."""
    spec = layout.spec
    lines = ["Slot crossings per trace"]
    for plane in spec.plane_layers:
        for trace in layout.traces:
            mine = [c for c in layout.crossings if c.layer == plane and c.polarity == trace.polarity]
            full = sum(c.kind == "full" for c in mine)
            extra = f" +{len(mine) - full} other" if len(mine) > full else ""
            lines.append(f"  {plane} {trace.polarity}: {full} full{extra}")
    errors = sum(f.severity == "error" for f in findings)
    warnings = sum(f.severity == "warning" for f in findings)
    lines.append(f"Findings: {errors} error(s), {warnings} warning(s)")
    if unlabelled:
        lines.append(f"  {unlabelled} rule id(s) left out for room;")
        lines.append("  see `ebglayout check` for all")
    lines.append(f"Fab minimums: slot {format_length(spec.min_slot, spec.units)}, "
                 f"copper {format_length(spec.min_copper, spec.units)}")
    if spec.plane_outline is None:
        lines.append("Plane outline not given: copper is")
        lines.append("shown only around the cut.")
    return lines
