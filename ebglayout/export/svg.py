"""SVG back-end of the preview: the drawing written by hand, one even-odd path per role, board items in mm
(fixed decimals) under a transform that flips y, so the file measures in board units.  Byte-stable."""
from __future__ import annotations

import re
from xml.sax.saxutils import escape

from .primitives import COLOURS, SIZE_PX, Fill, Markers, Polyline, Text, marker_outline

DECIMALS = 4
"""Decimals of board coordinates (mm) in the SVG: 0.1 um, far below any etched feature."""
PAGE_DECIMALS = 2
"""Decimals of page coordinates (px) in the SVG."""


_TRAILING = re.compile(r"(\.\d*?[1-9])0+(?!\d)|\.0+(?!\d)")


def _numbers(values, decimals: int) -> list[str]:
    fmt = f"{{:.{decimals}f}}".format
    return [fmt(v) for v in values]


def _trim(text: str) -> str:
    """Drop trailing zeros of fixed-decimal numbers (the value is unchanged)."""
    return _TRAILING.sub(r"\1", text)


def _num(value: float, decimals: int = PAGE_DECIMALS) -> str:
    text = f"{value:.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


def svg_text(items: list, title: str = "") -> str:
    """The drawing as an SVG document (page px; board-space items inside a y-flipping transform, in mm)."""
    width, height = SIZE_PX
    body: list[str] = []
    patterns: dict[tuple, str] = {}
    defs: list[str] = []
    group = None
    for item in items:
        view = getattr(item, "view", None)
        if view is not group:
            if group is not None:
                body.append("</g>")
            if view is not None:
                body.append(f'<g transform="matrix({" ".join(_num(v, 6) for v in view.matrix)})">')
            group = view
        scale = view.scale if view is not None else 1.0
        decimals = DECIMALS if view is not None else PAGE_DECIMALS
        if isinstance(item, Fill):
            body.append(_svg_fill(item, scale, decimals, patterns, defs, flipped=view is not None))
        elif isinstance(item, Polyline):
            body.append(_svg_polyline(item, scale, decimals))
        elif isinstance(item, Markers):
            body.append(_svg_markers(item))
        else:
            body.append(_svg_text_element(item))
    if group is not None:
        body.append("</g>")
    head = [
        '<?xml version="1.0" encoding="utf-8"?>',
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" viewBox="0 0 {width} {height}" '
        'font-family="DejaVu Sans, Verdana, Arial, sans-serif">',
        f"<title>{escape(title)}</title>",
    ]
    if defs:
        head += ["<defs>", *defs, "</defs>"]
    head.append(f'<rect width="{width}" height="{height}" fill="{COLOURS["page"]}"/>')
    return "\n".join(head + body + ["</svg>"]) + "\n"


def _svg_path_data(fill: Fill, decimals: int) -> str:
    numbers = _numbers(fill.coords.ravel().tolist(), decimals)
    return _trim("".join(f"M{' '.join(numbers[2 * a:2 * b])}Z" for a, b in fill.rings))


def _svg_fill(fill: Fill, scale: float, decimals: int, patterns: dict, defs: list, flipped: bool) -> str:
    """One even-odd path; a hatch is a pattern of the fill colour with stripes, sized in page px and turned so
    the stripes rise to the right on the page whether or not the path's space is y-flipped."""
    paint = fill.colour
    opacity = ""
    if fill.hatch:
        key = (fill.colour, fill.alpha, fill.hatch, scale, flipped)
        if key not in patterns:
            patterns[key] = f"hatch{len(patterns)}"
            d, w = 5.66 / scale, 1.41 / scale
            defs.append(f'<pattern id="{patterns[key]}" patternUnits="userSpaceOnUse" width="{_num(d, 6)}" '
                        f'height="{_num(d, 6)}" patternTransform="rotate({-45 if flipped else 45})">'
                        f'<rect width="{_num(d, 6)}" height="{_num(d, 6)}" fill="{fill.colour}" '
                        f'fill-opacity="{_num(fill.alpha, 3)}"/>'
                        f'<rect width="{_num(w, 6)}" height="{_num(d, 6)}" fill="{fill.hatch}"/></pattern>')
        paint = f"url(#{patterns[key]})"
    elif fill.alpha < 1.0:
        opacity = f' fill-opacity="{_num(fill.alpha, 3)}"'
    stroke = ""
    if fill.edge:
        stroke = f' stroke="{fill.edge}" stroke-width="{_num(fill.edge_px / scale, 6)}"'
    role = f' class="{fill.role}"' if fill.role else ""
    return (f'<path{role} fill="{paint}"{opacity} fill-rule="evenodd"{stroke} '
            f'd="{_svg_path_data(fill, decimals)}"/>')


def _svg_polyline(line: Polyline, scale: float, decimals: int) -> str:
    numbers = _numbers(line.points.ravel().tolist(), decimals)
    dash = ""
    if line.dash:
        dash = f' stroke-dasharray="{_num(line.dash[0] / scale, 6)} {_num(line.dash[1] / scale, 6)}"'
    role = f' class="{line.role}"' if line.role else ""
    return (f'<path{role} fill="none" stroke="{line.colour}" stroke-width="{_num(line.width_px / scale, 6)}"{dash} '
            f'd="{_trim("M" + " ".join(numbers))}"/>')


def _svg_markers(markers: Markers) -> str:
    outline = marker_outline(markers.kind, markers.size_px)
    parts = []
    if outline is None:
        r = markers.size_px / 2 - (markers.edge_px / 2 if markers.fill is None else 0.0)
        arc = f"a{_num(r)} {_num(r)} 0 1 0 "
        for x, y in markers.points:
            parts.append(f"M{_num(x - r)} {_num(y)}{arc}{_num(2 * r)} 0{arc}{_num(-2 * r)} 0Z")
    else:
        for x, y in markers.points:
            parts.append("M" + " ".join(f"{_num(x + dx)} {_num(y + dy)}" for dx, dy in outline) + "Z")
    stroke = f' stroke="{markers.edge}" stroke-width="{_num(markers.edge_px)}"' if markers.edge else ""
    return (f'<path class="{markers.role}" fill="{markers.fill or "none"}"{stroke} '
            f'd="{"".join(parts)}"/>')


def _svg_text_element(text: Text) -> str:
    attrs = [f'x="{_num(text.x)}"', f'y="{_num(text.y)}"', f'font-size="{_num(text.size)}"', f'fill="{text.colour}"']
    if text.bold:
        attrs.append('font-weight="bold"')
    if text.mono:
        attrs.append('font-family="DejaVu Sans Mono, Menlo, Consolas, monospace"')
    if text.anchor != "start":
        attrs.append(f'text-anchor="{text.anchor}"')
    if text.halo:
        attrs.append(f'stroke="{COLOURS["page"]}" stroke-width="3" stroke-linejoin="round" paint-order="stroke"')
    if text.rotate:
        attrs.append(f'transform="rotate({-text.rotate} {_num(text.x)} {_num(text.y)})"')
    return f"<text {' '.join(attrs)}>{escape(text.text)}</text>"
