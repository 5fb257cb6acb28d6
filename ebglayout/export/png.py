"""PNG back-end of the preview: the drawing rendered with Pillow on a palette canvas (fast to encode, exact
colours, anti-aliased text in a few shades).  Byte-stable: no dates, no software tag, fixed compression."""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import numpy as np
from PIL import Image, ImageChops, ImageDraw, ImageFont

from .primitives import COLOURS, SIZE_PX, Fill, Markers, Polyline, Text, View, marker_outline

PNG_COMPRESS_LEVEL = 3
"""zlib level for the PNG: on a palette image level 3 costs about what level 1 does and writes ~15 % less."""
FONT_FILES = {
    (False, False): "DejaVuSans.ttf", (True, False): "DejaVuSans-Bold.ttf",
    (False, True): "DejaVuSansMono.ttf", (True, True): "DejaVuSansMono-Bold.ttf",
}
FONT_DIRS = ("/usr/share/fonts/truetype/dejavu", "/usr/share/fonts/dejavu", "/usr/share/fonts/TTF",
             "/usr/local/share/fonts")
"""Where DejaVu usually is (Debian, Fedora, Arch, local installs); then Pillow's own search of the system's
font folders by file name; then Pillow's built-in font."""


def _rgb(colour: str) -> tuple[int, int, int]:
    return (int(colour[1:3], 16), int(colour[3:5], 16), int(colour[5:7], 16))


class _Palette:
    """Colours of the palette canvas, allocated in drawing order (so deterministic); blends are cached."""

    def __init__(self):
        self.colours: list[tuple[int, int, int]] = []
        self.lookup: dict[tuple[int, int, int], int] = {}
        self.blends: dict[tuple, int] = {}

    def index(self, colour) -> int:
        rgb = _rgb(colour) if isinstance(colour, str) else colour
        found = self.lookup.get(rgb)
        if found is None:
            if len(self.colours) < 256:
                found = len(self.colours)
                self.colours.append(rgb)
            else:
                found = min(range(256), key=lambda i: sum((a - b) ** 2 for a, b in zip(self.colours[i], rgb)))
            self.lookup[rgb] = found
        return found

    def blend(self, ink: str, under: int, alpha: float) -> int:
        """Index of ``ink`` laid at ``alpha`` over the colour at index ``under``."""
        key = (ink, under, alpha)
        found = self.blends.get(key)
        if found is None:
            top, base = _rgb(ink), self.colours[under]
            found = self.index(tuple(round(alpha * t + (1 - alpha) * b) for t, b in zip(top, base)))
            self.blends[key] = found
        return found

    def lut(self, ink: str, alpha: float, counts: list[int]) -> list[int]:
        """Point table laying ``ink`` at ``alpha`` over every index with a nonzero count."""
        table = list(range(256))
        for under, count in enumerate(counts):
            if count:
                table[under] = self.blend(ink, under, alpha)
        return table

    def flat(self) -> list[int]:
        return [c for rgb in self.colours for c in rgb]


TEXT_ALPHAS = (0.25, 0.5, 0.75, 1.0)
TEXT_LEVEL = np.searchsorted(np.array([32, 96, 160, 224]), np.arange(256), side="right").astype(np.uint8)
"""Anti-aliased text coverage (0-255) in five levels: none, then TEXT_ALPHAS."""
TEXT_TABLE = np.tile(np.arange(256, dtype=np.uint8), (len(TEXT_ALPHAS) + 1, 1))
HALO_PX = 2


@lru_cache(maxsize=None)
def _font(size: int, bold: bool, mono: bool):
    """DejaVu at ``size`` px from the usual places, else Pillow's own default font."""
    name = FONT_FILES[(bold, mono)]
    basic = ImageFont.Layout.BASIC if hasattr(ImageFont, "Layout") else ImageFont.LAYOUT_BASIC
    for candidate in [str(Path(d, name)) for d in FONT_DIRS] + [name]:
        try:
            return ImageFont.truetype(candidate, size, layout_engine=basic)
        except OSError:
            continue
    try:
        return ImageFont.load_default(size=size)
    except TypeError:
        return ImageFont.load_default()


@dataclass(frozen=True, eq=False)
class _Glyphs:
    """A rendered line of text: coverage levels (0-4), the mask of its inked pixels, the halo mask, the
    top-left's offset from the baseline start and the advance along the baseline."""

    levels: np.ndarray
    ink: Image.Image
    halo: Image.Image | None
    dx: int
    dy: int
    advance: float
    shaded: dict = field(default_factory=dict)
    """(index under, index per level) -> the levels mapped to those palette indices, built on first use."""


@lru_cache(maxsize=4096)
def _glyphs(text: str, size: int, bold: bool, mono: bool, halo: bool, rotate: int) -> _Glyphs:
    """Render a line of text once; cached, as most labels recur from one preview to the next."""
    font = _font(size, bold, mono)
    if isinstance(font, ImageFont.FreeTypeFont):
        left, top, right, bottom = font.getbbox(text, anchor="ls")
        advance = font.getlength(text)
        kwargs = {"anchor": "ls"}
    else:
        left, top, right, bottom = font.getbbox(text) if hasattr(font, "getbbox") else (0, 0, *font.getsize(text))
        advance = right
        kwargs = {}
    mask = Image.new("L", (max(1, right - left), max(1, bottom - top)), 0)
    ImageDraw.Draw(mask).text((-left, -top), text, fill=255, font=font, **kwargs)
    if not kwargs:
        top -= round(0.8 * bottom)
    levels = TEXT_LEVEL[np.asarray(mask)]
    ring = None
    if halo:
        h, w = levels.shape
        levels = np.pad(levels, HALO_PX)
        ring = _dilate(levels[HALO_PX:HALO_PX + h, HALO_PX:HALO_PX + w] > 0, HALO_PX)
        left, top = left - HALO_PX, top - HALO_PX
    dx, dy = left, top
    if rotate:
        dx, dy = top, -(left + levels.shape[1])
        levels = np.rot90(levels)
        ring = None if ring is None else np.rot90(ring)
    levels = np.ascontiguousarray(levels)
    levels.flags.writeable = False
    ink = Image.fromarray(np.where(levels > 0, 255, 0).astype(np.uint8))
    ring_mask = None if ring is None else Image.fromarray(np.where(ring, 255, 0).astype(np.uint8))
    return _Glyphs(levels, ink, ring_mask, dx, dy, advance)


class _Canvas:
    """An 8-bit canvas of palette indices, drawn with ImageDraw and blended through point tables."""

    def __init__(self):
        self.palette = _Palette()
        self.image = Image.new("L", SIZE_PX, self.palette.index(COLOURS["page"]))
        self.draw = ImageDraw.Draw(self.image)

    def paste_blend(self, ink: str, alpha: float, box: tuple[int, int, int, int], mask: Image.Image) -> None:
        if alpha >= 1.0:
            self.image.paste(self.palette.index(ink), box, mask)
        else:
            region = self.image.crop(box)
            self.image.paste(region.point(self.palette.lut(ink, alpha, region.histogram(mask))), box, mask)

    def finish(self) -> Image.Image:
        """The canvas as a palette image (putpalette turns the "L" canvas into "P" in place; the canvas is done)."""
        self.image.putpalette(self.palette.flat())
        return self.image


@lru_cache(maxsize=1)
def _hatch_tile() -> Image.Image:
    """Full-page mask of "/" stripes, 5.7 px apart and 1.4 px wide (as the SVG pattern)."""
    width, height = SIZE_PX
    period = np.arange(8)
    cell = np.where((period[:, None] + period[None, :]) % 8 < 2, 255, 0).astype(np.uint8)
    return Image.fromarray(np.tile(cell, (height // 8 + 1, width // 8 + 1))[:height, :width].copy())


def png_image(items: list) -> Image.Image:
    """The drawing rendered with Pillow as a palette ("P") image of SIZE_PX."""
    canvas = _Canvas()
    for item in items:
        if isinstance(item, Fill):
            _png_fill(canvas, item)
        elif isinstance(item, Polyline):
            _png_polyline(canvas, item)
        elif isinstance(item, Markers):
            _png_markers(canvas, item)
        else:
            _png_text(canvas, item)
    return canvas.finish()


def _to_page(points: np.ndarray, view: View | None) -> np.ndarray:
    if view is None:
        return np.asarray(points, dtype=float)
    a, _, _, d, e, f = view.matrix
    return np.asarray(points, dtype=float) * (a, d) + (e, f)


def _png_fill(canvas: _Canvas, fill: Fill) -> None:
    page = _to_page(fill.coords, fill.view)
    width, height = SIZE_PX
    x0, y0 = (max(0, int(math.floor(v)) - 1) for v in page.min(axis=0))
    x1, y1 = (min(limit, int(math.ceil(v)) + 2) for v, limit in zip(page.max(axis=0), (width, height)))
    if x1 <= x0 or y1 <= y0:
        return
    holes = any(b - a > 1 for a, b in fill.polygons)
    if fill.alpha >= 1.0 and not holes and not fill.hatch:
        ink = canvas.palette.index(fill.colour)
        for a, _ in fill.polygons:
            start, stop = fill.rings[a]
            canvas.draw.polygon(page[start:stop].ravel().tolist(), fill=ink)
    else:
        mask = Image.new("L", (x1 - x0, y1 - y0), 0)
        pen = ImageDraw.Draw(mask)
        local = page - (x0, y0)

        def extent(poly):
            start, stop = fill.rings[poly[0]]
            lo, hi = local[start:stop].min(axis=0), local[start:stop].max(axis=0)
            return -float((hi - lo).prod())

        for a, b in sorted(fill.polygons, key=extent):
            for k in range(a, b):
                start, stop = fill.rings[k]
                pen.polygon(local[start:stop].ravel().tolist(), fill=255 if k == a else 0)
        canvas.paste_blend(fill.colour, fill.alpha, (x0, y0, x1, y1), mask)
        if fill.hatch:
            stripes = ImageChops.multiply(mask, _hatch_tile().crop((x0, y0, x1, y1)))
            canvas.image.paste(canvas.palette.index(fill.hatch), (x0, y0, x1, y1), stripes)
    if fill.edge:
        ink = canvas.palette.index(fill.edge)
        width_px = max(1, round(fill.edge_px))
        for start, stop in fill.rings:
            ring = page[start:stop]
            canvas.draw.line(np.vstack((ring, ring[:1])).ravel().tolist(), fill=ink, width=width_px)


def _dashes(points: np.ndarray, on: float, off: float) -> list[list[tuple[float, float]]]:
    """A polyline cut into dashes of ``on`` px with ``off`` px gaps (the pattern runs on across vertices)."""
    out: list[list[tuple[float, float]]] = []
    current: list[tuple[float, float]] = []
    phase, drawing = on, True
    for (ax, ay), (bx, by) in zip(points[:-1].tolist(), points[1:].tolist()):
        length = math.hypot(bx - ax, by - ay)
        done = 0.0
        if drawing and not current:
            current = [(ax, ay)]
        while length - done > phase:
            done += phase
            at = (ax + (bx - ax) * done / length, ay + (by - ay) * done / length)
            if drawing:
                current.append(at)
                out.append(current)
                current = []
            else:
                current = [at]
            drawing = not drawing
            phase = on if drawing else off
        phase -= length - done
        if drawing:
            current.append((bx, by))
    if drawing and len(current) > 1:
        out.append(current)
    return out


def _png_polyline(canvas: _Canvas, line: Polyline) -> None:
    page = _to_page(line.points, line.view)
    ink = canvas.palette.index(line.colour)
    width = max(1, round(line.width_px))
    joint = "curve" if width > 2 else None
    if not line.dash:
        canvas.draw.line(page.ravel().tolist(), fill=ink, width=width, joint=joint)
        return
    for run in _dashes(page, *line.dash):
        canvas.draw.line([c for p in run for c in p], fill=ink, width=width, joint=joint)


def _png_markers(canvas: _Canvas, markers: Markers) -> None:
    outline = marker_outline(markers.kind, markers.size_px)
    fill = None if markers.fill is None else canvas.palette.index(markers.fill)
    edge = None if markers.edge is None else canvas.palette.index(markers.edge)
    edge_px = max(1, round(markers.edge_px))
    r = markers.size_px / 2
    for x, y in markers.points:
        if outline is None:
            canvas.draw.ellipse((x - r, y - r, x + r, y + r), fill=fill, outline=edge, width=edge_px)
        else:
            canvas.draw.polygon([(x + dx, y + dy) for dx, dy in outline], fill=fill, outline=edge)


def _dilate(on: np.ndarray, r: int) -> np.ndarray:
    """Boolean mask grown by ``r`` px in x and y (a square structuring element), padded by ``r`` on every side."""
    h, w = on.shape
    grown = np.zeros((h + 2 * r, w + 2 * r), dtype=bool)
    rows = np.zeros((h, w + 2 * r), dtype=bool)
    for k in range(2 * r + 1):
        rows[:, k:k + w] |= on
    for k in range(2 * r + 1):
        grown[k:k + h] |= rows
    return grown


def _png_text(canvas: _Canvas, text: Text) -> None:
    """Lay anti-aliased text over the canvas through a blend table indexed by coverage level and the colour
    under each pixel (a single colour inside a halo or on a plain ground, the common case)."""
    g = _glyphs(text.text, max(1, round(text.size)), text.bold, text.mono, text.halo, text.rotate)
    shift = {"start": 0.0, "middle": 0.5, "end": 1.0}[text.anchor] * g.advance
    x0 = round(text.x + g.dx - (0.0 if text.rotate else shift))
    y0 = round(text.y + g.dy + (shift if text.rotate else 0.0))
    h, w = g.levels.shape
    box_ = (x0, y0, x0 + w, y0 + h)
    palette, image = canvas.palette, canvas.image
    if g.halo is not None:
        under = palette.index(COLOURS["page"])
        image.paste(under, box_, g.halo)
    else:
        low, high = image.crop(box_).getextrema()
        under = low if low == high else None
    if under is not None:
        shades = (under, *(palette.blend(text.colour, under, a) for a in TEXT_ALPHAS))
        patch = g.shaded.get(shades)
        if patch is None:
            patch = g.shaded[shades] = Image.fromarray(np.array(shades, dtype=np.uint8)[g.levels])
        image.paste(patch, box_, g.ink)
        return
    region = np.array(image.crop(box_))
    table = TEXT_TABLE.copy()
    for below in np.flatnonzero(np.bincount(region[g.levels > 0], minlength=256)).tolist():
        table[1:, below] = [palette.blend(text.colour, below, a) for a in TEXT_ALPHAS]
    image.paste(Image.fromarray(table[g.levels, region]), box_)
