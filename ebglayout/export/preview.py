"""SVG and PNG preview of a layout for review: one drawing (``drawing.py``), two small back-ends
(``svg.py`` by hand, ``png.py`` with Pillow).  Both files are byte-stable."""
from __future__ import annotations

from pathlib import Path
from typing import Sequence

from ..layout import Layout
from . import atomic_path
from .drawing import SIZE_PX, build_drawing, drawing_title
from .png import PNG_COMPRESS_LEVEL, png_image
from .svg import svg_text

__all__ = ["SIZE_PX", "build_drawing", "png_image", "svg_text", "write_preview"]


def write_preview(layout: Layout, svg_path: str | Path, png_path: str | Path, findings: Sequence = (),
                  notch: dict | None = None) -> tuple[Path, Path]:
    """Draw the layout and write it as SVG and PNG (each atomically); return both paths.

    ``notch`` (optional): {"cells": [{"modes": [{"f_hz": ...}, ...], "lc_f_hz": ..., "notch_hz": ...}, ...],
    "notch_spread": {"low_hz": ..., "high_hz": ...}, "target_hz": ...} adds a per-cell notch plot.
    """
    svg_path, png_path = Path(svg_path), Path(png_path)
    items = build_drawing(layout, findings, notch)
    title = drawing_title(layout)
    with atomic_path(svg_path) as tmp:
        tmp.write_text(svg_text(items, title), encoding="utf-8")
    image = png_image(items)
    with atomic_path(png_path) as tmp:
        image.save(tmp, format="PNG", compress_level=PNG_COMPRESS_LEVEL)
    return svg_path, png_path
