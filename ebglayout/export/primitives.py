"""The preview's vocabulary: filled polygons with holes, polylines, markers and texts, which the SVG and PNG
back-ends (``svg.py``, ``png.py``) both render, so the two files cannot disagree; with them the page size, the
palette, and the text metrics that place lettering by its top or bottom and keep labels apart.

Board-space primitives carry their panel's ``View`` (board mm mapped to page px, y flipped); the others are in
page px.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely

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
CAP, DESCENT = 0.73, 0.24
"""DejaVu Sans cap height and descent as fractions of the font size, used to place text by its top or bottom."""
ASCENT, ADVANCE = 0.8, 0.7
"""Bounds of DejaVu Sans (Bold) lettering as fractions of the font size: the tallest letters' ascent, and an
advance per character at least as wide as any rule id's average (0.66 measured), used to keep labels apart."""


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


def geometry_fill(geom, colour: str, view: View | None, role: str, **style) -> Fill | None:
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


def page_rect(x0: float, y0: float, x1: float, y1: float, colour: str, **style) -> Fill:
    """A page-space rectangle as a Fill."""
    coords = np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]], dtype=float)
    return Fill(coords, ((0, 4),), ((0, 1),), colour, **style)


def baseline(y: float, va: str, size: float) -> float:
    """Baseline y that puts a line of text's top, centre or bottom at ``y`` (page px)."""
    return {"top": y + CAP * size, "center": y + CAP / 2 * size, "bottom": y - DESCENT * size}.get(va, y)


ANCHOR = {"left": "start", "center": "middle", "right": "end"}


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
