"""The preview as a drawing: a list of primitives (filled polygons with holes, polylines, markers, texts)
that the SVG and PNG back-ends (``svg.py``, ``png.py``) both render, so the two files cannot disagree.

Board-space primitives carry their panel's ``View`` (board mm mapped to page px, y flipped); the
others are in page px.  One panel per distinct plane cut: a stripline's two planes normally carry the
identical cut, so they share one panel titled with both layer names; if the cuts ever differ (e.g. read
from a board), each gets its own panel.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import shapely
from shapely.affinity import affine_transform
from shapely.geometry import LineString, Point, Polygon, box

from ..layout import Layout, PlaneCut
from ..units import LENGTH_UNITS_MM, format_length
from . import CAUTION, CellFrame

SIZE_PX = (1440, 900)
"""Page size of both files: the SVG's viewBox and the PNG's pixels."""
TRACE_ALPHA = 0.75
"""Traces are laid semi-transparent so the slot edges under them stay visible."""
COLOURS = {
    "page": "#ffffff", "text": "#000000", "axis": "#000000", "grid": "#d9d9d9",
    "plane": "#f4e1c1", "slot": "#ffffff", "patch": "#d99a4e", "bridge": "#8c4a1c", "edge": "#5a4632",
    "P": "#1f5fbf", "N": "#8e44ad", "hatch": "#ffffff", "full": "#111111", "other": "#e6007e",
    "error": "#d62728", "warning": "#ff8c00", "dim": "#2b2b2b", "caution": "#8b0000",
    "band": "#cde8cd", "guaranteed": "#f4c7a1", "model": "#6a1b9a", "target": "#2e7d32", "mode": "#333333", "lc": "#8c4a1c", "notch": "#1565c0",
    "track": "#3f7f6a", "via": "#5c5c5c", "cell": "#3b2a14",
}
MAIN_BOX = (80.0, 128.0, 1016.0, 818.0)
"""left, top, right, bottom (px) of the drawing panels; the right column holds legend, summary and notch plot."""
PANEL_GAP = 62.0
NOTCH_BOX = (1110.0, 657.0, 1411.0, 819.0)
LEGEND_AT = (1052.0, 118.0)
SUMMARY_AT = (1050.0, 398.0)
CAP, DESCENT = 0.73, 0.24
"""DejaVu Sans cap height and descent as fractions of the font size, used to place text by its top or bottom."""
ASCENT, ADVANCE = 0.8, 0.7
"""Bounds of DejaVu Sans (Bold) lettering as fractions of the font size: the tallest letters' ascent, and an
advance per character at least as wide as any rule id's average (0.66 measured), used to keep labels apart."""
LABEL_SIZE = 14.0



@dataclass(frozen=True)
class View:
    """A board window (mm) mapped onto the page (px) with y flipped: 1 mm is ``scale`` px both ways."""

    x0: float
    y0: float
    x1: float
    y1: float
    left: float
    top: float
    scale: float

    @property
    def matrix(self) -> tuple[float, float, float, float, float, float]:
        """SVG matrix(a b c d e f) taking board mm to page px."""
        s = self.scale
        return (s, 0.0, 0.0, -s, self.left - self.x0 * s, self.top + self.y1 * s)

    @property
    def right(self) -> float:
        return self.left + (self.x1 - self.x0) * self.scale

    @property
    def bottom(self) -> float:
        return self.top + (self.y1 - self.y0) * self.scale

    def px(self, x: float, y: float) -> tuple[float, float]:
        return (self.left + (x - self.x0) * self.scale, self.top + (self.y1 - y) * self.scale)


@dataclass(frozen=True, eq=False)
class Fill:
    """Polygons with holes, filled even-odd.

    ``coords`` holds every ring's vertices (not repeating the first), ``rings`` each
    ring's (start, stop) rows and ``polygons`` each polygon's (first, stop) rings,
    exterior first.  Board mm under ``view``, page px without.
    """

    coords: np.ndarray
    rings: tuple[tuple[int, int], ...]
    polygons: tuple[tuple[int, int], ...]
    colour: str
    alpha: float = 1.0
    edge: str | None = None
    edge_px: float = 0.0
    hatch: str | None = None
    view: View | None = None
    role: str = ""


@dataclass(frozen=True, eq=False)
class Polyline:
    points: np.ndarray
    colour: str
    width_px: float
    dash: tuple[float, float] | None = None
    view: View | None = None
    role: str = ""


@dataclass(frozen=True)
class Markers:
    """Same-style markers at page points: "dot", "ring", "x", "diamond" or "bar" (a short horizontal bar)."""

    points: tuple[tuple[float, float], ...]
    kind: str
    size_px: float
    fill: str | None
    edge: str | None = None
    edge_px: float = 0.0
    role: str = ""


@dataclass(frozen=True)
class Text:
    """One line of text; (x, y) is the start, middle or end of its baseline; ``rotate`` 90 reads bottom to top."""

    x: float
    y: float
    text: str
    size: float
    colour: str
    bold: bool = False
    anchor: str = "start"
    mono: bool = False
    halo: bool = False
    rotate: int = 0
    role: str = ""

    def box(self) -> tuple[float, float, float, float]:
        """Page box (x0, y0, x1, y1) the text's lettering and halo stay within (horizontal text)."""
        width = ADVANCE * self.size * len(self.text)
        x0 = self.x - {"start": 0.0, "middle": width / 2, "end": width}[self.anchor]
        pad = 2.0 if self.halo else 0.0
        return (x0 - pad, self.y - ASCENT * self.size - pad, x0 + width + pad, self.y + DESCENT * self.size + pad)


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
    items += _legend_items(_legend_entries(layout, findings, tracks, vias), *LEGEND_AT, row=21.0, columns=1,
                           size=14.0)
    x, y = SUMMARY_AT
    for i, line in enumerate(_summary(layout, findings, unlabelled)):
        indent = len(line) - len(line.lstrip(" "))
        items.append(Text(x + 8 * indent, y + 16.5 * i, line.strip(), 13, COLOURS["text"], mono=True))
    if notch:
        items += _notch_items(notch, NOTCH_BOX)
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


def _fill(geom, colour: str, view: View | None, role: str, **style) -> Fill | None:
    """A Fill of a shapely geometry's polygonal parts (lines and points in it are ignored)."""
    parts = shapely.get_parts(shapely.get_parts(geom))
    parts = parts[(shapely.get_type_id(parts) == 3) & ~shapely.is_empty(parts)]
    if not len(parts):
        return None
    rings, owner = shapely.get_rings(parts, return_index=True)
    coords, which = shapely.get_coordinates(rings, return_index=True)
    ends = np.cumsum(np.bincount(which, minlength=len(rings)))
    starts = np.concatenate(([0], ends[:-1]))
    keep = np.ones(len(coords), dtype=bool)
    keep[ends - 1] = False
    ring_spans = tuple((int(s - k), int(e - 1 - k)) for k, (s, e) in enumerate(zip(starts, ends)))
    first = np.searchsorted(owner, np.arange(len(parts) + 1))
    polygons = tuple((int(a), int(b)) for a, b in zip(first[:-1], first[1:]))
    return Fill(coords[keep], ring_spans, polygons, colour, view=view, role=role, **style)


def _rect(x0: float, y0: float, x1: float, y1: float, colour: str, **style) -> Fill:
    """A page-space rectangle as a Fill."""
    coords = np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]], dtype=float)
    return Fill(coords, ((0, 4),), ((0, 1),), colour, **style)


def _baseline(y: float, va: str, size: float) -> float:
    """Baseline y that puts a line of text's top, centre or bottom at ``y`` (page px)."""
    return {"top": y + CAP * size, "center": y + CAP / 2 * size, "bottom": y - DESCENT * size}.get(va, y)


ANCHOR = {"left": "start", "center": "middle", "right": "end"}


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
    items += [_fill(plane.difference(cut.outline), COLOURS["plane"], view, "plane"),
              _fill(cut.slot, COLOURS["slot"], view, "slot", **edge),
              _fill(cut.patch, COLOURS["patch"], view, "patch", **edge),
              _fill(cut.bridge, COLOURS["bridge"], view, "bridge", **edge)]
    if outline is not None:
        rim = outline.exterior.intersection(window)
        for piece in getattr(rim, "geoms", [rim]):
            if piece.geom_type == "LineString" and not piece.is_empty:
                items.append(Polyline(np.asarray(piece.coords), COLOURS["edge"], 1.2, (6.0, 4.0), view, "outline"))
    copper = _other_copper(tracks, vias, window)
    items += [_fill(copper["track"], COLOURS["track"], view, "track", alpha=TRACE_ALPHA),
              _fill(copper["via"], COLOURS["via"], view, "via", edge=COLOURS["page"], edge_px=0.8)]
    for trace in layout.traces:
        hatch = COLOURS["hatch"] if trace.polarity == "N" else None
        items.append(_fill(trace.polygon.intersection(window), COLOURS[trace.polarity], view,
                           f"trace-{trace.polarity}", alpha=TRACE_ALPHA, hatch=hatch))
    net_labels = _inside(view, [t for t in (_trace_label(trace, window, cut.outline, view)
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
    rings, labels, left_out = _finding_marks(_findings_for(findings, layers, spec.plane_layers), view,
                                             _page_shape([t.polygon for t in layout.traces] + list(copper.values()),
                                                         view),
                                             [t.box() for t in net_labels + numbers])
    items += rings + labels
    scale = LENGTH_UNITS_MM[units]
    items += _axes((view.left, view.top, view.right, view.bottom),
                   [(view.px(v * scale, 0)[0], s) for v, s in
                    _ticks(view.x0 / scale, view.x1 / scale, (view.right - view.left) / 110)],
                   [(view.px(0, v * scale)[1], s) for v, s in
                    _ticks(view.y0 / scale, view.y1 / scale, (view.bottom - view.top) / 80)],
                   f"x ({units})", f"y ({units})")
    return [i for i in items if i is not None], left_out


def _inside(view: View, labels: list) -> list:
    """Net labels kept inside the panel: one that sticks out on a side is turned to end (or start) where the
    label before it ends (or starts), away from that side, and moved down past any label it would then overlap."""
    from dataclasses import replace

    placed: list = []
    for text in labels:
        x0, _, x1, _ = text.box()
        if x1 > view.right - 4:
            end = min([view.right - 4] + [o.box()[2] for o in placed])
            text = replace(text, anchor="end", x=end - 2)
        elif x0 < view.left + 4:
            start = max([view.left + 4] + [o.box()[0] for o in placed])
            text = replace(text, anchor="start", x=start + 2)
        for other in placed:
            a, b = text.box(), other.box()
            if a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]:
                text = replace(text, y=text.y + (b[3] - a[1]) + 2)
        placed.append(text)
    return placed


def _other_copper(tracks: Sequence, vias: Sequence, window) -> dict:
    """Other tracks (at their width, round ends) and vias/pads (at their diameter) inside the window."""
    shapes = {"track": [LineString(t.points).buffer(t.width / 2, quad_segs=8) for t in tracks if len(t.points) > 1],
              "via": [Point(v.at).buffer(v.diameter / 2, quad_segs=8) for v in vias]}
    return {role: shapely.union_all(parts).intersection(window) if parts else Polygon()
            for role, parts in shapes.items()}


def _page_shape(geoms: list, view: View):
    """Board geometries (mm) as one shapely geometry in page px, prepared for many intersection tests."""
    a, b, c, d, e, f = view.matrix
    shape = affine_transform(shapely.union_all([g for g in geoms if not g.is_empty]), [a, c, b, d, e, f])
    shapely.prepare(shape)
    return shape


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


LABEL_RADII = (15.0, 28.0, 44.0, 62.0, 84.0, 110.0, 140.0)
LABEL_TURNS = 16
COVERED_PX = 90.0
"""A finding whose rule id is already written this close (page px) to its ring gets no second label."""


RING_PX = 23.0


def _finding_marks(findings: list, view: View, avoid, taken: list) -> tuple[list, list, int]:
    """A ring at each finding and its rule id where it overlaps no other label, no other finding's ring, no trace
    and no other copper: beside the ring, else farther out with a leader line.  Returns rings, labels and how many
    were left out."""
    centres = [view.px(*f.at) for f in findings]
    rings: list = []
    labels: list = []
    written: list[tuple[str, float, float]] = []
    boxes = list(taken)
    frame = (view.left + 2, view.top + 2, view.right - 2, view.bottom - 2)
    left_out = 0
    for f, (x, y) in zip(findings, centres):
        colour = COLOURS["error"] if f.severity == "error" else COLOURS["warning"]
        rings.append(Markers(((x, y),), "ring", RING_PX, None, colour, 3.0, "finding"))
        if any(rule == f.rule and math.hypot(x - wx, y - wy) <= COVERED_PX for rule, wx, wy in written):
            continue
        others = [c for c in centres if math.hypot(c[0] - x, c[1] - y) > 1.0]
        placed = _free_label(f.rule, x, y, colour, frame, boxes, avoid, others)
        if placed is None:
            left_out += 1
            continue
        text, radius = placed
        boxes.append(text.box())
        written.append((f.rule, x, y))
        if radius > LABEL_RADII[0]:
            bx0, by0, bx1, by1 = text.box()
            tx, ty = min(max(x, bx0), bx1), min(max(y, by0), by1)
            length = math.hypot(tx - x, ty - y) or 1.0
            start = (x + 11.5 * (tx - x) / length, y + 11.5 * (ty - y) / length)
            labels.append(Polyline(np.array([start, (tx, ty)]), colour, 1.2, role="leader"))
        labels.append(text)
    return rings, labels, left_out


def _free_label(rule: str, x: float, y: float, colour: str, frame: tuple, boxes: list, avoid, rings: list):
    """The first label position around (x, y), nearest first, whose box is inside ``frame`` and clear of
    ``boxes``, ``avoid`` and the finding rings centred at ``rings``; (Text, radius) or None."""
    reach = RING_PX / 2 + 1.5
    for radius in LABEL_RADII:
        for k in range(LABEL_TURNS):
            angle = math.pi / 4 + 2 * math.pi * k / LABEL_TURNS
            cx, cy = x + radius * math.cos(angle), y - radius * math.sin(angle)
            anchor = "start" if math.cos(angle) > 0.2 else "end" if math.cos(angle) < -0.2 else "middle"
            text = Text(cx, cy + (ASCENT - DESCENT) / 2 * LABEL_SIZE, rule, LABEL_SIZE, colour, bold=True,
                        anchor=anchor, halo=True, role="finding-label")
            x0, y0, x1, y1 = text.box()
            if x0 < frame[0] or y0 < frame[1] or x1 > frame[2] or y1 > frame[3]:
                continue
            if any(x0 < b[2] and b[0] < x1 and y0 < b[3] and b[1] < y1 for b in boxes):
                continue
            if any(math.hypot(max(x0 - rx, 0.0, rx - x1), max(y0 - ry, 0.0, ry - y1)) < reach for rx, ry in rings):
                continue
            if avoid is not None and not avoid.is_empty and avoid.intersects(box(x0, y0, x1, y1)):
                continue
            return text, radius
    return None


def _crowded(points: tuple, size: float) -> bool:
    """True when markers in drawing order typically lie closer than their size (a long row seen whole): then they
    are drawn small and without their white rim, which would otherwise wipe out their neighbours."""
    if len(points) < 2:
        return False
    steps = np.sort(np.hypot(*np.diff(np.asarray(points), axis=0).T))
    return bool(steps[len(steps) // 2] < size)


def _trace_label(trace, window, cut, view: View) -> Text | None:
    """Net name near whichever end of the trace's visible run lies farther from the cut, on the trace's own side."""
    x0, y0, x1, y1 = window.bounds
    inside = trace.centreline.intersection(window.buffer(-0.03 * (x1 - x0)))
    pieces = [g for g in getattr(inside, "geoms", [inside]) if g.geom_type == "LineString" and not g.is_empty]
    if not pieces:
        return None
    first, last = pieces[0], pieces[-1]
    at_start = Point(first.coords[0]).distance(cut) >= Point(last.coords[-1]).distance(cut)
    line = first if at_start else last
    step = 0.02 * (x1 - x0)
    at = min(step, line.length) if at_start else max(0.0, line.length - step)
    (px, py), (qx, qy) = line.interpolate(at).coords[0], line.interpolate(min(line.length, at + 1e-3)).coords[0]
    dx, dy = qx - px, qy - py
    norm = (dx * dx + dy * dy) ** 0.5 or 1.0
    side = 1.0 if trace.polarity == "P" else -1.0
    nx, ny = -dy / norm * side, dx / norm * side
    ex, ey = (dx, dy) if at_start else (-dx, -dy)
    if abs(dx) >= abs(dy):
        ha, va = ("left" if ex > 0 else "right"), ("bottom" if ny > 0 else "top")
    else:
        ha, va = ("left" if nx > 0 else "right"), ("bottom" if ey > 0 else "top")
    ax, ay = view.px(px, py)
    size = 12.5
    return Text(ax + 13 * nx, _baseline(ay - 13 * ny, va, size), f"{trace.polarity}: {trace.net}", size,
                COLOURS[trace.polarity], bold=True, anchor=ANCHOR[ha], halo=True)


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
    return Text(x + gap * outward[0], _baseline(y - gap * outward[1], va, size), text, size, COLOURS["dim"],
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


def _ticks(lo: float, hi: float, count: float) -> list[tuple[float, str]]:
    """Round-numbered ticks in [lo, hi], about ``count`` of them, with labels at the step's decimals."""
    if not hi > lo:
        return []
    raw = (hi - lo) / max(count, 1.0)
    mag = 10.0 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1.0, 2.0, 2.5, 5.0, 10.0) if m * mag >= raw * (1 - 1e-9))
    exponent = math.floor(math.log10(step) + 1e-9)
    decimals = max(0, -exponent + (1 if abs(step / 10.0 ** exponent - 2.5) < 1e-9 else 0))
    out = []
    for k in range(math.ceil(lo / step - 1e-9), math.floor(hi / step + 1e-9) + 1):
        value = k * step
        out.append((value, f"{0.0 if k == 0 else value:.{decimals}f}"))
    return out


def _axes(frame: tuple[float, float, float, float], xticks: list, yticks: list, xlabel: str, ylabel: str,
          size: float = 12.5) -> list:
    """Axes box, outward ticks with labels, and axis titles (page px; tick positions already mapped)."""
    left, top, right, bottom = frame
    ink = COLOURS["axis"]
    items: list = [Polyline(np.array([(left, top), (right, top), (right, bottom), (left, bottom), (left, top)]),
                            ink, 1.0, role="axes")]
    for x, label in xticks:
        items.append(Polyline(np.array([(x, bottom), (x, bottom + 4)]), ink, 1.0, role="axes"))
        items.append(Text(x, bottom + 7 + CAP * size, label, size, ink, anchor="middle"))
    widest = 0
    for y, label in yticks:
        items.append(Polyline(np.array([(left - 4, y), (left, y)]), ink, 1.0, role="axes"))
        items.append(Text(left - 7, y + CAP / 2 * size, label, size, ink, anchor="end"))
        widest = max(widest, len(label))
    items.append(Text((left + right) / 2, bottom + 14 + CAP * size + 15, xlabel, 13, ink, anchor="middle"))
    items.append(Text(left - 14 - 0.62 * size * widest, (top + bottom) / 2, ylabel, 13, ink, anchor="middle",
                      rotate=90))
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


def _legend_items(entries: list, x: float, y: float, row: float, columns: int, size: float,
                  column_width: float = 150.0) -> list:
    """Swatch and label per entry, filled row by row; (x, y) is the first swatch's left centre."""
    items: list = []
    for k, (label, swatch) in enumerate(entries):
        sx, sy = x + (k % columns) * column_width, y + (k // columns) * row
        kind = swatch[0]
        if kind == "rect":
            _, colour, style = swatch
            items.append(_rect(sx, sy - 5.5, sx + 24, sy + 5.5, colour, role="legend", **style))
        elif kind == "line":
            _, colour, width, dash = swatch
            items.append(Polyline(np.array([(sx, sy), (sx + 24, sy)]), colour, width, dash, role="legend"))
        else:
            _, marker, msize, fill, edge, edge_px = swatch
            items.append(Markers(((sx + 12, sy),), marker, msize, fill, edge, edge_px, "legend"))
        items.append(Text(sx + 32, sy + CAP / 2 * size, label, size, COLOURS["text"]))
    return items


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


def _notch_items(notch: dict, frame: tuple[float, float, float, float]) -> list:
    """Per-cell notch frequencies against band and target: cavity modes, the bridged LC estimate and the
    governing notch, each where the estimate gives it; with the circuit model (``notch["model"]``) also its
    nominal Scc21 notch and the guaranteed stopband over the tolerance corners."""
    left, top, right, bottom = frame
    cells = notch.get("cells", [])
    band = notch.get("notch_spread") or {}
    has_band = band.get("low_hz") is not None and band.get("high_hz") is not None
    target = notch.get("target_hz")
    points: dict[str, list[tuple[int, float]]] = {"mode": [], "lc": [], "notch": []}
    numbers = [cell.get("index", i) for i, cell in enumerate(cells)]
    for i, cell in zip(numbers, cells):
        values = [("mode", m.get("f_hz")) for m in cell.get("modes", [])]
        values += [("lc", cell.get("lc_f_hz")), ("notch", cell.get("notch_hz"))]
        for kind, hz in values:
            if hz:
                points[kind].append((i, hz / 1e9))
    ghz = [g for series in points.values() for _, g in series]
    ghz += [band["low_hz"] / 1e9, band["high_hz"] / 1e9] if has_band else []
    ghz += [target / 1e9] if target else []
    model = notch.get("model") or {}
    model_notch = (model.get("scc21") or {}).get("notch_hz")
    guaranteed = (model.get("tolerance") or {}).get("guaranteed_stopband_hz") or []
    ghz += [model_notch / 1e9] if model_notch else []
    ghz += [g / 1e9 for b in guaranteed for g in b]
    lo, hi = (min(ghz), max(ghz)) if ghz else (0.0, 1.0)
    pad = 0.06 * (hi - lo) if hi > lo else 0.5
    lo, hi = lo - pad, hi + pad
    count = max(len(cells), 1)
    first = min(numbers, default=0)

    def px(i: float, g: float) -> tuple[float, float]:
        return (left + (i - first + 0.5) / count * (right - left), bottom - (g - lo) / (hi - lo) * (bottom - top))

    xticks = [(float(i), str(i)) for i in numbers] if count <= 12 else \
        [(v, s) for v, s in _ticks(first, first + count - 1, 6) if float(v).is_integer()]
    yticks = _ticks(lo, hi, 5)
    items: list = []
    for i, _ in xticks:
        x = px(i, lo)[0]
        items.append(Polyline(np.array([(x, top), (x, bottom)]), COLOURS["grid"], 0.6, role="grid"))
    for g, _ in yticks:
        y = px(1, g)[1]
        items.append(Polyline(np.array([(left, y), (right, y)]), COLOURS["grid"], 0.6, role="grid"))
    entries = []
    if has_band:
        y_low = min(bottom, max(top, px(1, band["low_hz"] / 1e9)[1]))
        y_high = min(bottom, max(top, px(1, band["high_hz"] / 1e9)[1]))
        items.append(_rect(left, y_high, right, y_low, COLOURS["band"], role="band"))
        entries.append(("notch spread", ("rect", COLOURS["band"], {})))
    for low_hz, high_hz in guaranteed:
        y_low, y_high = px(1, low_hz / 1e9)[1], px(1, high_hz / 1e9)[1]
        items.append(_rect(left + 0.8 * (right - left), y_high, right, y_low, COLOURS["guaranteed"], role="band"))
    if guaranteed:
        entries.append(("guaranteed (model)", ("rect", COLOURS["guaranteed"], {})))
    if model_notch:
        y = px(1, model_notch / 1e9)[1]
        items.append(Polyline(np.array([(left, y), (right, y)]), COLOURS["model"], 1.2, (2.0, 2.0), role="target"))
        entries.append(("model notch", ("line", COLOURS["model"], 1.2, (2.0, 2.0))))
    if target:
        y = px(1, target / 1e9)[1]
        items.append(Polyline(np.array([(left, y), (right, y)]), COLOURS["target"], 1.5, (6.0, 3.0), role="target"))
        entries.append(("target", ("line", COLOURS["target"], 1.5, (6.0, 3.0))))
    styles = {"mode": ("cavity mode", ("marker", "bar", 18.0, COLOURS["mode"], None, 0.0)),
              "lc": ("bridged LC", ("marker", "diamond", 9.0, COLOURS["lc"], None, 0.0)),
              "notch": ("cell notch", ("marker", "ring", 11.0, None, COLOURS["notch"], 2.2))}
    pitch = (right - left) / count
    for kind, (label, swatch) in styles.items():
        if points[kind]:
            _, marker, msize, fill, edge, edge_px = swatch
            size = min(msize, max(3.0, 0.8 * pitch))
            items.append(Markers(tuple(px(i, g) for i, g in points[kind]), marker, size, fill, edge,
                                 min(edge_px, size / 4), kind))
            entries.append((label, swatch))
    items += _axes(frame, [(px(i, lo)[0], s) for i, s in xticks], [(px(1, g)[1], s) for g, s in yticks],
                   "cell", "GHz")
    rows = -(-len(entries) // 2)
    items += _legend_items(entries, left, top - 10 - 16 * (rows - 1), row=16.0, columns=2, size=12.0)
    items.append(Text(left, top - 24 - 16 * (rows - 1), "notch estimate per cell", 14, COLOURS["text"]))
    return items


def marker_outline(kind: str, size: float) -> list[tuple[float, float]] | None:
    """Vertices (offsets from the marker's centre, page px) of a polygonal marker; None for circles."""
    r = size / 2
    if kind == "diamond":
        return [(0.0, -r), (r, 0.0), (0.0, r), (-r, 0.0)]
    if kind == "bar":
        t = max(1.0, size * 0.08)
        return [(-r, -t), (r, -t), (r, t), (-r, t)]
    if kind == "x":
        h = size * 0.14
        a = r * math.sqrt(2) - h
        plus = [(h, h), (a, h), (a, -h), (h, -h), (h, -a), (-h, -a), (-h, -h), (-a, -h), (-a, h), (-h, h),
                (-h, a), (h, a)]
        c = math.sqrt(0.5)
        return [(c * (x - y), c * (x + y)) for x, y in plus]
    return None
