"""Where the preview writes its labels: a ring at each finding with its rule id placed clear of other labels,
other rings, the traces and other copper (farther out with a leader line when the near places are taken, left out
when none is free), and the net names beside the traces, kept inside their panel.
"""
from __future__ import annotations

import math

import numpy as np
import shapely
from shapely.affinity import affine_transform
from shapely.geometry import Point, box

from .primitives import ANCHOR, ASCENT, COLOURS, DESCENT, Markers, Polyline, Text, View, baseline

LABEL_SIZE = 14.0
LABEL_RADII = (15.0, 28.0, 44.0, 62.0, 84.0, 110.0, 140.0)
LABEL_TURNS = 16
COVERED_PX = 90.0
"""A finding whose rule id is already written this close (page px) to its ring gets no second label."""
RING_PX = 23.0


def finding_marks(findings: list, view: View, avoid, taken: list) -> tuple[list, list, int]:
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


def page_shape(geoms: list, view: View):
    """Board geometries (mm) as one shapely geometry in page px, prepared for many intersection tests."""
    a, b, c, d, e, f = view.matrix
    shape = affine_transform(shapely.union_all([g for g in geoms if not g.is_empty]), [a, c, b, d, e, f])
    shapely.prepare(shape)
    return shape


def trace_label(trace, window, cut, view: View) -> Text | None:
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
    return Text(ax + 13 * nx, baseline(ay - 13 * ny, va, size), f"{trace.polarity}: {trace.net}", size,
                COLOURS[trace.polarity], bold=True, anchor=ANCHOR[ha], halo=True)


def keep_inside(view: View, labels: list) -> list:
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
