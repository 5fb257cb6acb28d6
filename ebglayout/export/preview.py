"""SVG and PNG preview of a layout for review: one drawing (``drawing.py``), two small back-ends
(``svg.py`` by hand, ``png.py`` with Pillow).  Both files are byte-stable."""
from __future__ import annotations

from pathlib import Path
from typing import Sequence

from ..layout import Layout
from . import atomic_path
from .drawing import build_drawing, drawing_title
from .primitives import SIZE_PX
from .png import PNG_COMPRESS_LEVEL, png_image
from .svg import svg_text

__all__ = ["SIZE_PX", "build_drawing", "drawing_title", "png_image", "svg_text", "write_png", "write_preview",
           "write_svg"]


def write_preview(layout: Layout, svg_path: str | Path, png_path: str | Path, findings: Sequence = (),
                  notch: dict | None = None) -> tuple[Path, Path]:
    """Draw the layout and write it as SVG and PNG (each atomically); return both paths.

    ``notch`` (optional): {"cells": [{"modes": [{"f_hz": ...}, ...], "lc_f_hz": ..., "notch_hz": ...}, ...],
    "notch_spread": {"low_hz": ..., "high_hz": ...}, "target_hz": ...} adds a per-cell notch plot.
    """
    items = build_drawing(layout, findings, notch)
    return write_svg(items, drawing_title(layout), svg_path), write_png(items, png_path)


def write_svg(items: list, title: str, path: str | Path) -> Path:
    """Write a drawing (``build_drawing``) as SVG, atomically."""
    with atomic_path(path) as tmp:
        tmp.write_text(svg_text(items, title), encoding="utf-8")
    return Path(path)


def write_png(items: list, path: str | Path) -> Path:
    """Write a drawing (``build_drawing``) as PNG, atomically."""
    image = png_image(items)
    with atomic_path(path) as tmp:
        image.save(tmp, format="PNG", compress_level=PNG_COMPRESS_LEVEL)
    return Path(path)
