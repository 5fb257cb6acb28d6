"""Charts built from the primitives: round-numbered ticks, an axes box, a swatch legend, and the preview's
notch-per-cell plot.  ``response_plot.py`` builds its page from the same pieces, so the two pages share one look.
"""
from __future__ import annotations

import math

import numpy as np

from .primitives import CAP, COLOURS, Markers, Polyline, Text, page_rect


def ticks(lo: float, hi: float, count: float) -> list[tuple[float, str]]:
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


def axes(frame: tuple[float, float, float, float], xticks: list, yticks: list, xlabel: str, ylabel: str,
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


def legend_items(entries: list, x: float, y: float, row: float, columns: int, size: float,
                  column_width: float = 150.0) -> list:
    """Swatch and label per entry, filled row by row; (x, y) is the first swatch's left centre."""
    items: list = []
    for k, (label, swatch) in enumerate(entries):
        sx, sy = x + (k % columns) * column_width, y + (k // columns) * row
        kind = swatch[0]
        if kind == "rect":
            _, colour, style = swatch
            items.append(page_rect(sx, sy - 5.5, sx + 24, sy + 5.5, colour, role="legend", **style))
        elif kind == "line":
            _, colour, width, dash = swatch
            items.append(Polyline(np.array([(sx, sy), (sx + 24, sy)]), colour, width, dash, role="legend"))
        else:
            _, marker, msize, fill, edge, edge_px = swatch
            items.append(Markers(((sx + 12, sy),), marker, msize, fill, edge, edge_px, "legend"))
        items.append(Text(sx + 32, sy + CAP / 2 * size, label, size, COLOURS["text"]))
    return items


def notch_items(notch: dict, frame: tuple[float, float, float, float]) -> list:
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
        [(v, s) for v, s in ticks(first, first + count - 1, 6) if float(v).is_integer()]
    yticks = ticks(lo, hi, 5)
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
        items.append(page_rect(left, y_high, right, y_low, COLOURS["band"], role="band"))
        entries.append(("notch spread", ("rect", COLOURS["band"], {})))
    for low_hz, high_hz in guaranteed:
        y_low, y_high = px(1, low_hz / 1e9)[1], px(1, high_hz / 1e9)[1]
        items.append(page_rect(left + 0.8 * (right - left), y_high, right, y_low, COLOURS["guaranteed"], role="band"))
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
    items += axes(frame, [(px(i, lo)[0], s) for i, s in xticks], [(px(1, g)[1], s) for g, s in yticks],
                  "cell", "GHz")
    rows = -(-len(entries) // 2)
    items += legend_items(entries, left, top - 10 - 16 * (rows - 1), row=16.0, columns=2, size=12.0)
    items.append(Text(left, top - 24 - 16 * (rows - 1), "notch estimate per cell", 14, COLOURS["text"]))
    return items
