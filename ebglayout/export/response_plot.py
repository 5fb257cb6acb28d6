"""|Scc21| and |Sdd21| against frequency from a result file's content (``response.response_json``), drawn with the
preview's primitives (``primitives.py``) and written by the same two back-ends: SVG by hand, PNG with Pillow.

The page shows both curves in dB against GHz, the threshold line, the Scc21 stopband shaded (and, when the data
carry a ``tolerance`` entry from ``response.corners_json``, the band every corner rejects), the target marked, the
notch ringed, and where the data came from in the title.  Byte-stable, like the preview.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..response import DB_FLOOR
from .chart import axes, legend_items, ticks
from .primitives import CAP, COLOURS, Markers, Polyline, Text, page_rect
from .preview import write_png, write_svg

PLOT_BOX = (110.0, 120.0, 1060.0, 790.0)
"""left, top, right, bottom (px) of the plot; the right column holds the legend and the summary."""
LEGEND_AT = (1100.0, 140.0)
SUMMARY_AT = (1100.0, 330.0)
FLOOR_DB = -80.0
"""Lowest dB the plot shows; deeper points are drawn on the bottom edge (the summary gives the true depth)."""
GUARANTEED_COLOUR = "#8cc68c"
"""The band every tolerance corner rejects: a darker, striped shade of the stopband's green."""
CURVE_STYLE = {"scc21": ("|Scc21| (common mode)", COLOURS["notch"], 2.0),
               "sdd21": ("|Sdd21| (differential)", COLOURS["warning"], 2.0)}


@dataclass(frozen=True)
class PlotFrame:
    """GHz and dB mapped onto the plot's page box (dB up)."""

    ghz0: float
    ghz1: float
    db0: float
    db1: float
    box: tuple[float, float, float, float] = PLOT_BOX

    def x(self, ghz):
        left, _, right, _ = self.box
        return left + (np.asarray(ghz, dtype=float) - self.ghz0) / (self.ghz1 - self.ghz0) * (right - left)

    def y(self, db):
        _, top, _, bottom = self.box
        clipped = np.clip(np.asarray(db, dtype=float), self.db0, self.db1)
        return top + (self.db1 - clipped) / (self.db1 - self.db0) * (bottom - top)


def source_label(source: str) -> str:
    """Short name of where the curves came from, for the title."""
    text = source.strip().lower()
    if text.startswith("full-wave"):
        return "full-wave (openEMS)"
    if text.startswith("model"):
        return "model"
    return source.strip()


def plot_frame(data: dict) -> PlotFrame:
    """The axes' ranges: the sweep in GHz, and dB from the deepest point shown (10 dB steps, not below FLOOR_DB,
    at least 10 dB under the threshold) up to the highest point or 0 dB, plus a little headroom."""
    ghz = np.asarray(data["freq_hz"], dtype=float) / 1e9
    values = np.concatenate([np.asarray(data["scc21_db"], dtype=float), np.asarray(data["sdd21_db"], dtype=float)])
    low = min(float(values.min()), data["threshold_db"] - 10.0)
    low = max(FLOOR_DB, 10.0 * np.floor(low / 10.0))
    high = max(0.0, float(values.max())) + 2.0
    return PlotFrame(float(ghz[0]), float(ghz[-1]), float(low), float(high))


def build_response_drawing(data: dict, name: str = "") -> list:
    """The plot as a list of drawing primitives, in painting order."""
    frame = plot_frame(data)
    left, top, right, bottom = frame.box
    ghz = np.asarray(data["freq_hz"], dtype=float) / 1e9
    cc = data["scc21"]
    items: list = [Text(29, 34, _title(data, name), 20, COLOURS["text"], bold=True),
                   Text(29, 74, _subtitle(data), 15, COLOURS["text"])]
    entries: list = []
    if cc["stopband_hz"] is not None:
        x0, x1 = (float(v) for v in frame.x(np.asarray(cc["stopband_hz"]) / 1e9))
        items.append(page_rect(x0, top, x1, bottom, COLOURS["band"], role="stopband"))
        entries.append((f"Scc21 stopband ({cc['threshold_db']:g} dB)", ("rect", COLOURS["band"], {})))
    tolerance = data.get("tolerance") or {}
    for low, high in tolerance.get("guaranteed_stopband_hz", []):
        x0, x1 = (float(v) for v in frame.x(np.array([low, high]) / 1e9))
        items.append(page_rect(x0, top, x1, bottom, GUARANTEED_COLOUR, role="guaranteed", hatch=COLOURS["band"]))
    if tolerance.get("guaranteed_stopband_hz"):
        count = len(tolerance.get("corners", []))
        entries.append((f"rejected at all {count} corners", ("rect", GUARANTEED_COLOUR, {"hatch": COLOURS["band"]})))
    xticks = ticks(frame.ghz0, frame.ghz1, (right - left) / 110)
    yticks = ticks(frame.db0, frame.db1, (bottom - top) / 60)
    for value, _ in xticks:
        x = float(frame.x(value))
        items.append(Polyline(np.array([(x, top), (x, bottom)]), COLOURS["grid"], 0.6, role="grid"))
    for value, _ in yticks:
        y = float(frame.y(value))
        items.append(Polyline(np.array([(left, y), (right, y)]), COLOURS["grid"], 0.6, role="grid"))
    y = float(frame.y(cc["threshold_db"]))
    items.append(Polyline(np.array([(left, y), (right, y)]), COLOURS["caution"], 1.2, (8.0, 4.0), role="threshold"))
    entries.append((f"threshold {cc['threshold_db']:g} dB", ("line", COLOURS["caution"], 1.2, (8.0, 4.0))))
    target = data.get("target_hz")
    if target is not None and frame.ghz0 <= target / 1e9 <= frame.ghz1:
        x = float(frame.x(target / 1e9))
        items.append(Polyline(np.array([(x, top), (x, bottom)]), COLOURS["target"], 1.5, (6.0, 3.0), role="target"))
        items.append(Text(x + 4, top + 4 + CAP * 12.5, f"target {target / 1e9:.4g} GHz", 12.5, COLOURS["target"],
                          halo=True))
        entries.append(("target", ("line", COLOURS["target"], 1.5, (6.0, 3.0))))
    for key in ("sdd21", "scc21"):
        label, colour, width = CURVE_STYLE[key]
        points = np.column_stack([frame.x(ghz), frame.y(data[f"{key}_db"])])
        items.append(Polyline(points, colour, width, role=key))
    entries += [(CURVE_STYLE[k][0], ("line", CURVE_STYLE[k][1], CURVE_STYLE[k][2], None)) for k in ("scc21", "sdd21")]
    notch = (float(frame.x(cc["notch_hz"] / 1e9)), float(frame.y(cc["depth_db"])))
    items.append(Markers((notch,), "ring", 13.0, None, COLOURS["notch"], 2.2, "notch"))
    entries.append(("Scc21 notch", ("marker", "ring", 11.0, None, COLOURS["notch"], 2.2)))
    items += axes(frame.box, [(float(frame.x(v)), s) for v, s in xticks],
                  [(float(frame.y(v)), s) for v, s in yticks], "frequency (GHz)", "|S| (dB)")
    items += legend_items(entries, *LEGEND_AT, row=21.0, columns=1, size=14.0)
    x, y = SUMMARY_AT
    for i, line in enumerate(_summary(data)):
        items.append(Text(x, y + 17.0 * i, line, 13, COLOURS["text"], mono=True))
    caution = _wrap("CAUTION: " + data["caution"], 150)
    for i, line in enumerate(caution):
        items.append(Text(29, 884 - 20 * (len(caution) - 1 - i), line, 14, COLOURS["caution"]))
    return items


def write_response_plot(data: dict, svg_path: str | Path, png_path: str | Path, name: str = "") -> tuple[Path, Path]:
    """Draw a result file's content and write it as SVG and PNG (each atomically); return both paths."""
    items = build_response_drawing(data, name)
    return write_svg(items, _title(data, name), svg_path), write_png(items, png_path)


def _title(data: dict, name: str) -> str:
    prefix = f"{name}: " if name else ""
    return f"{prefix}|Scc21| and |Sdd21|, {source_label(data['source'])}"


def _subtitle(data: dict) -> str:
    cc = data["scc21"]
    text = f"Scc21 notch {cc['notch_hz'] / 1e9:.4g} GHz at {_db_text(cc['depth_db'], 1)}"
    if cc["stopband_hz"] is None:
        text += f"; never at or below {cc['threshold_db']:g} dB"
    else:
        low, high = cc["stopband_hz"]
        text += f"; stopband {low / 1e9:.4g} - {high / 1e9:.4g} GHz"
    return text + f"; Sdd21 at the notch {_db_text(data['sdd21_at_notch_db'], 2)}"


def _summary(data: dict) -> list[str]:
    """Text block for the right column; a long source wraps at 34 characters."""
    cc = data["scc21"]
    lines = ["Source"] + ["  " + line for line in _wrap(data["source"], 34)]
    lines.append("Common mode (Scc21)")
    lines.append(f"  notch {cc['notch_hz'] / 1e9:.4g} GHz, {_db_text(cc['depth_db'], 1)}")
    if cc.get("notch_at_grid_edge"):
        lines.append("  at the sweep's edge: widen it")
    if cc["stopband_hz"] is not None:
        low, high = cc["stopband_hz"]
        lines.append(f"  <= {cc['threshold_db']:g} dB: {low / 1e9:.4g}-{high / 1e9:.4g} GHz")
    target = data.get("target_hz")
    if target is not None and data.get("scc21_at_target_db") is not None:
        lines.append(f"  at target {target / 1e9:.4g} GHz: {_db_text(data['scc21_at_target_db'], 1)}")
    tolerance = data.get("tolerance") or {}
    if tolerance.get("corners"):
        bands = tolerance.get("guaranteed_stopband_hz") or []
        lines.append(f"Over {len(tolerance['corners'])} corners")
        lines.append(f"  shallowest notch {_db_text(tolerance['worst_depth_db'], 1)}")
        lines += [f"  all reject {low / 1e9:.4g}-{high / 1e9:.4g} GHz" for low, high in bands] or \
            ["  no band rejected at every corner"]
    lines.append("Differential (Sdd21)")
    lines.append(f"  at the notch {_db_text(data['sdd21_at_notch_db'], 2)}")
    if target is not None and data.get("sdd21_at_target_db") is not None:
        lines.append(f"  at target {_db_text(data['sdd21_at_target_db'], 2)}")
    lines.append(f"  worst {_db_text(data['sdd21_worst_db'], 2)}")
    lines.append("Mode conversion (Sdc21)")
    lines.append(f"  highest {_db_text(data['sdc21_worst_db'], 1)}")
    return lines


def _db_text(value: float, decimals: int) -> str:
    """A dB value for reading: no "-0.00", and "none" for an exactly zero |S| (the dB floor)."""
    if value <= DB_FLOOR:
        return "none (|S| = 0 throughout)"
    return f"{round(value, decimals) + 0.0:.{decimals}f} dB"


def _wrap(text: str, width: int) -> list[str]:
    """Words of ``text`` in lines of at most ``width`` characters (a longer word gets a line of its own)."""
    lines, current = [], ""
    for word in text.split():
        if current and len(current) + 1 + len(word) > width:
            lines.append(current)
            current = word
        else:
            current = f"{current} {word}".strip()
    return lines + ([current] if current else [])
