"""SVG and PNG preview of a layout for review, drawn with matplotlib's Agg and SVG back-ends (no GUI).

One panel per distinct plane cut: a stripline's two planes normally carry the
identical cut, so they share one panel titled with both layer names; if the cuts
ever differ (e.g. read from a board), each gets its own panel.  Output is
deterministic: a fixed SVG hash salt, no dates, no software tag in the PNG.
"""
from __future__ import annotations

from pathlib import Path
from typing import Sequence

import matplotlib
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, PathPatch
from matplotlib.path import Path as MplPath
from shapely.geometry import Point, Polygon, box
from shapely.ops import unary_union

from ..layout import Layout, PlaneCut
from . import CAUTION, CellFrame, atomic_path

FIGSIZE_IN = (12.0, 7.5)
DPI = 120
"""PNG size is FIGSIZE_IN x DPI = 1440 x 900 pixels."""
RC = {
    "svg.hashsalt": "ebglayout",
    "svg.fonttype": "none",
    "font.family": "DejaVu Sans",
    "font.size": 9,
    "path.simplify": False,
}
COLOURS = {
    "plane": "#f4e1c1", "slot": "#ffffff", "patch": "#d99a4e", "bridge": "#8c4a1c", "edge": "#5a4632",
    "P": "#1f5fbf", "N": "#8e44ad", "full": "#111111", "other": "#e6007e",
    "error": "#d62728", "warning": "#ff8c00", "dim": "#2b2b2b", "caution": "#8b0000",
}
MAIN_RECT = (0.055, 0.09, 0.65, 0.80)
"""left, bottom, width, height of the drawing area in figure fractions; the right column holds legend and notch."""


def write_preview(layout: Layout, svg_path: str | Path, png_path: str | Path, findings: Sequence = (),
                  notch: dict | None = None) -> tuple[Path, Path]:
    """Draw the layout and write it as SVG and PNG (each atomically); return both paths.

    ``notch`` (optional): {"cells": [{"modes": [{"f_hz": ...}, ...], "lc_f_hz": ...}, ...],
    "band": {"low_hz": ..., "high_hz": ...}, "target_hz": ...} adds a per-cell notch plot.
    """
    svg_path, png_path = Path(svg_path), Path(png_path)
    with matplotlib.rc_context(RC):
        fig = build_figure(layout, findings, notch)
        with atomic_path(svg_path) as tmp:
            fig.savefig(tmp, format="svg", metadata={"Date": None})
        with atomic_path(png_path) as tmp:
            fig.savefig(tmp, format="png", dpi=DPI, metadata={"Software": None})
    return svg_path, png_path


def build_figure(layout: Layout, findings: Sequence = (), notch: dict | None = None) -> Figure:
    """The preview figure (call inside ``matplotlib.rc_context(RC)`` for the house style)."""
    fig = Figure(figsize=FIGSIZE_IN, dpi=DPI)
    fig.suptitle(_title(layout), fontsize=12, fontweight="bold", x=0.02, ha="left")
    fig.text(0.02, 0.915, _subtitle(layout), fontsize=9, ha="left", va="bottom")
    groups = _cut_groups(layout.cuts)
    left, bottom, width, height = MAIN_RECT
    step = height / len(groups)
    view = _view(layout, findings, width * FIGSIZE_IN[0], (step - 0.05) * FIGSIZE_IN[1])
    for k, group in enumerate(groups):
        ax = fig.add_axes((left, bottom + (len(groups) - 1 - k) * step, width, step - 0.05))
        _draw_panel(ax, layout, group, findings, view, dimensions=(k == 0))
    fig.legend(handles=_legend_handles(layout, findings), loc="upper left", bbox_to_anchor=(0.725, 0.89),
               frameon=False, fontsize=8.5)
    fig.text(0.73, 0.56, "\n".join(_summary(layout, findings)), fontsize=8, va="top",
             ha="left", family="DejaVu Sans Mono")
    if notch:
        _draw_notch(fig.add_axes((0.77, 0.09, 0.21, 0.18)), notch)
    fig.text(0.02, 0.02, "CAUTION: " + CAUTION, fontsize=8.5, color=COLOURS["caution"], ha="left", va="bottom")
    return fig


def _title(layout: Layout) -> str:
    spec = layout.spec
    counts = []
    for trace in layout.traces:
        per_layer = [len(layout.full_crossings(plane, trace.polarity)) for plane in spec.plane_layers]
        counts.append(f"{trace.polarity} {'/'.join(str(n) for n in per_layer)}")
    return f"{spec.name}: {spec.style}, {spec.count} cell(s), full slot crossings {', '.join(counts)}"


def _subtitle(layout: Layout) -> str:
    spec = layout.spec
    text = (f"pair on {spec.pair_layer}, cut in {', '.join(spec.plane_layers)}; board coordinates in mm; "
            f"slot {spec.slot:.3f} mm, web {spec.web:.3f} mm")
    if spec.target_hz:
        text += f"; notch target {spec.target_hz / 1e9:.2f} GHz"
    return text


def _cut_groups(cuts: Sequence[PlaneCut]) -> list[list[PlaneCut]]:
    """Plane cuts grouped by identical geometry (zero symmetric-difference area in every role)."""
    groups: list[list[PlaneCut]] = []
    for cut in cuts:
        for group in groups:
            ref = group[0]
            if all(ref.role(r).symmetric_difference(cut.role(r)).area < 1e-12 for r in ("slot", "patch", "bridge")):
                group.append(cut)
                break
        else:
            groups.append([cut])
    return groups


def _view(layout: Layout, findings: Sequence, width_in: float, height_in: float) -> tuple[float, float, float, float]:
    """Board window: the cut, the traces near it and any finding, widened to the axes' aspect (1 mm = 1 mm)."""
    cut = unary_union([c.outline for c in layout.cuts])
    cx0, cy0, cx1, cy1 = cut.bounds
    reach = max(2.0, 0.6 * max(cx1 - cx0, cy1 - cy0))
    near = box(cx0 - reach, cy0 - reach, cx1 + reach, cy1 + reach)
    x0, y0, x1, y1 = unary_union([cut] + [t.polygon.intersection(near) for t in layout.traces]).bounds
    xs = [f.at[0] for f in findings] + [x0, x1]
    ys = [f.at[1] for f in findings] + [y0, y1]
    x0, x1, y0, y1 = min(xs), max(xs), min(ys), max(ys)
    margin = max(1.0, 0.06 * max(x1 - x0, y1 - y0))
    x0, y0, x1, y1 = x0 - margin, y0 - margin, x1 + margin, y1 + margin
    want = width_in / height_in
    w, h = x1 - x0, y1 - y0
    if w / h < want:
        grow = (h * want - w) / 2
        x0, x1 = x0 - grow, x1 + grow
    else:
        grow = (w / want - h) / 2
        y0, y1 = y0 - grow, y1 + grow
    return (x0, y0, x1, y1)


def _polygon_path(geom) -> MplPath | None:
    """A compound matplotlib path (exteriors and holes) for a shapely (Multi)Polygon."""
    verts, codes = [], []
    for poly in getattr(geom, "geoms", [geom]):
        if not isinstance(poly, Polygon) or poly.is_empty:
            continue
        for ring in (poly.exterior, *poly.interiors):
            pts = list(ring.coords)
            verts += pts
            codes += [MplPath.MOVETO] + [MplPath.LINETO] * (len(pts) - 2) + [MplPath.CLOSEPOLY]
    return MplPath(verts, codes) if verts else None


def _fill(ax, geom, **style) -> None:
    path = _polygon_path(geom)
    if path is not None:
        ax.add_patch(PathPatch(path, **style))


def _draw_panel(ax, layout: Layout, group: list[PlaneCut], findings: Sequence, view, dimensions: bool) -> None:
    spec = layout.spec
    cut = group[0]
    layers = [c.layer for c in group]
    x0, y0, x1, y1 = view
    window = box(x0, y0, x1, y1)
    plane = window if spec.plane_outline is None else window.intersection(Polygon(spec.plane_outline))
    _fill(ax, plane.difference(cut.outline), facecolor=COLOURS["plane"], edgecolor="none", zorder=1)
    if spec.plane_outline is not None:
        ax.plot(*Polygon(spec.plane_outline).exterior.xy, color=COLOURS["edge"], lw=0.8, ls="--", zorder=2)
    _fill(ax, cut.slot, facecolor=COLOURS["slot"], edgecolor=COLOURS["edge"], lw=0.5, zorder=2)
    _fill(ax, cut.patch, facecolor=COLOURS["patch"], edgecolor=COLOURS["edge"], lw=0.5, zorder=3)
    _fill(ax, cut.bridge, facecolor=COLOURS["bridge"], edgecolor=COLOURS["edge"], lw=0.5, zorder=3)
    for trace in layout.traces:
        hatch = "////" if trace.polarity == "N" else None
        _fill(ax, trace.polygon, facecolor=COLOURS[trace.polarity], edgecolor=COLOURS[trace.polarity],
              alpha=0.75, lw=0.3, hatch=hatch, zorder=4)
        _label_trace(ax, trace, window, cut.outline)
    here = [c for c in layout.crossings if c.layer == cut.layer]
    full = [c.point for c in here if c.kind == "full"]
    other = [c.point for c in here if c.kind != "full"]
    if full:
        ax.plot(*zip(*full), ls="none", marker="o", ms=3.5, mfc=COLOURS["full"], mec="white", mew=0.5, zorder=6)
    if other:
        ax.plot(*zip(*other), ls="none", marker="X", ms=9, mfc=COLOURS["other"], mec="white", mew=0.6, zorder=6)
    if dimensions and layout.cells:
        _annotate_dimensions(ax, layout)
    for f in _findings_for(findings, layers, spec.plane_layers):
        colour = COLOURS["error"] if f.severity == "error" else COLOURS["warning"]
        ax.plot(*f.at, ls="none", marker="o", ms=14, mfc="none", mec=colour, mew=2.0, zorder=7)
        ax.annotate(f.rule, f.at, xytext=(9, 9), textcoords="offset points", color=colour, fontsize=8.5,
                    fontweight="bold", zorder=8,
                    bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": colour, "lw": 0.8})
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)
    ax.set_aspect("equal", adjustable="box")
    ax.tick_params(labelsize=7.5)
    ax.set_xlabel("x (mm)", fontsize=8)
    ax.set_ylabel("y (mm)", fontsize=8)
    note = " (identical cut)" if len(layers) > 1 else ""
    ax.set_title(f"plane {' + '.join(layers)}{note}", fontsize=9, loc="left")


def _label_trace(ax, trace, window, cut) -> None:
    """Net name near whichever end of the trace's visible run lies farther from the cut, on the trace's own side."""
    x0, y0, x1, y1 = window.bounds
    inside = trace.centreline.intersection(window.buffer(-0.03 * (x1 - x0)))
    pieces = [g for g in getattr(inside, "geoms", [inside]) if g.geom_type == "LineString" and not g.is_empty]
    if not pieces:
        return
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
    ax.annotate(f"{trace.polarity}: {trace.net}", (px, py), xytext=(8 * nx, 8 * ny), textcoords="offset points",
                ha=ha, va=va, color=COLOURS[trace.polarity], fontsize=7.5, fontweight="bold", zorder=8,
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.8})


def _findings_for(findings: Sequence, layers: list[str], plane_layers: Sequence[str]) -> list:
    """Findings on one of this panel's layers, or not tied to a plane layer, in a stable order."""
    mine = [f for f in findings if f.layer in layers or f.layer not in plane_layers]
    return sorted(mine, key=lambda f: (f.severity != "error", f.rule, f.at))


def _annotate_dimensions(ax, layout: Layout) -> None:
    """Patch along/across size on the first cell and a callout for the slot width."""
    cell = layout.cells[0]
    frame = CellFrame(cell)
    pu0, pv0, pu1, pv1 = frame.local_bounds(cell.patch)
    ou0, ov0, ou1, ov1 = frame.local_bounds(cell.outer)
    off = 0.35 * (pv1 - pv0)
    arrow = {"arrowstyle": "<|-|>", "color": COLOURS["dim"], "lw": 0.8, "shrinkA": 0, "shrinkB": 0, "mutation_scale": 7}
    ax.annotate("", frame.board(pu1, ov0 - off), xytext=frame.board(pu0, ov0 - off), arrowprops=arrow, zorder=5)
    _dim_label(ax, frame.board((pu0 + pu1) / 2, ov0 - off), frame.direction(0.0, -1.0), f"{pu1 - pu0:.3f} mm")
    ax.annotate("", frame.board(ou0 - off, pv1), xytext=frame.board(ou0 - off, pv0), arrowprops=arrow, zorder=5)
    _dim_label(ax, frame.board(ou0 - off, pv1 - 0.25 * (pv1 - pv0)), frame.direction(-1.0, 0.0),
               f"{pv1 - pv0:.3f} mm", extend=frame.direction(0.0, 1.0))
    slot_at = frame.board(pu0 + 0.2 * (pu1 - pu0), (pv1 + ov1) / 2)
    text_at = frame.board(pu0 + 0.2 * (pu1 - pu0), ov1 + off)
    ha, va = _alignment(frame.direction(0.0, 1.0))
    ax.annotate(f"slot {ov1 - pv1:.3f} mm", slot_at, xytext=text_at, ha=ha, va=va, fontsize=7.5,
                color=COLOURS["dim"], zorder=5,
                arrowprops={"arrowstyle": "-|>", "color": COLOURS["dim"], "lw": 0.8, "mutation_scale": 7})


def _alignment(outward: tuple[float, float], extend: tuple[float, float] = (0.0, 0.0)) -> tuple[str, str]:
    """Text alignment that puts text on the ``outward`` side of its anchor, running towards ``extend``."""
    ox, oy = outward
    ex, ey = extend
    ha = "left" if ox > 0.3 else "right" if ox < -0.3 else "center"
    va = "bottom" if oy > 0.3 else "top" if oy < -0.3 else "center"
    if ha == "center":
        ha = "left" if ex > 0.3 else "right" if ex < -0.3 else "center"
    if va == "center":
        va = "bottom" if ey > 0.3 else "top" if ey < -0.3 else "center"
    return ha, va


def _dim_label(ax, at: tuple[float, float], outward: tuple[float, float], text: str,
               extend: tuple[float, float] = (0.0, 0.0)) -> None:
    """Dimension text just beside its arrow, on the side away from the cell, running towards ``extend``."""
    ha, va = _alignment(outward, extend)
    ax.annotate(text, at, xytext=(4 * outward[0], 4 * outward[1]), textcoords="offset points", ha=ha, va=va,
                fontsize=7.5, color=COLOURS["dim"], zorder=5)


def _legend_handles(layout: Layout, findings: Sequence) -> list:
    """Legend entries for what this figure actually shows."""
    handles = [
        Patch(facecolor=COLOURS["plane"], edgecolor="none", label=f"plane copper ({layout.spec.plane_net})"),
        Patch(facecolor=COLOURS["slot"], edgecolor=COLOURS["edge"], label="slot (copper removed)"),
        Patch(facecolor=COLOURS["patch"], edgecolor=COLOURS["edge"], label="patch"),
    ]
    if any(not cut.bridge.is_empty for cut in layout.cuts):
        handles.append(Patch(facecolor=COLOURS["bridge"], edgecolor=COLOURS["edge"], label="bridge"))
    for trace in layout.traces:
        hatch = "////" if trace.polarity == "N" else None
        handles.append(Patch(facecolor=COLOURS[trace.polarity], alpha=0.75, hatch=hatch,
                             label=f"{trace.polarity} trace {trace.net}"))
    handles.append(Line2D([], [], ls="none", marker="o", ms=5, mfc=COLOURS["full"], mec="white",
                          label="full slot crossing"))
    if any(c.kind != "full" for c in layout.crossings):
        handles.append(Line2D([], [], ls="none", marker="X", ms=8, mfc=COLOURS["other"], mec="white",
                              label="along / ends in slot"))
    for severity in ("error", "warning"):
        if any(f.severity == severity for f in findings):
            handles.append(Line2D([], [], ls="none", marker="o", ms=10, mfc="none", mec=COLOURS[severity], mew=2,
                                  label=f"{severity} (rule id beside)"))
    return handles


def _summary(layout: Layout, findings: Sequence) -> list[str]:
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
    lines.append(f"Fab minimums: slot {spec.min_slot:.3f} mm, copper {spec.min_copper:.3f} mm")
    if spec.plane_outline is None:
        lines.append("Plane outline not given: copper is")
        lines.append("shown only around the cut.")
    return lines


def _draw_notch(ax, notch: dict) -> None:
    """Per-cell notch frequencies against band and target: cavity modes, the bridged LC estimate and the
    governing notch, each where the estimate gives it."""
    cells = notch.get("cells", [])
    band = notch.get("band") or {}
    if band.get("low_hz") is not None and band.get("high_hz") is not None:
        ax.axhspan(band["low_hz"] / 1e9, band["high_hz"] / 1e9, color="#cde8cd", zorder=0, label="band")
    if notch.get("target_hz"):
        ax.axhline(notch["target_hz"] / 1e9, color="#2e7d32", ls="--", lw=1.0, label="target")
    points: dict[str, tuple[list, list]] = {"mode": ([], []), "lc": ([], []), "notch": ([], [])}
    for i, cell in enumerate(cells, start=1):
        values = [("mode", m.get("f_hz")) for m in cell.get("modes", [])]
        values += [("lc", cell.get("lc_f_hz")), ("notch", cell.get("notch_hz"))]
        for kind, hz in values:
            if hz:
                points[kind][0].append(i)
                points[kind][1].append(hz / 1e9)
    styles = {"mode": ("cavity mode", {"marker": "_", "ms": 14, "mew": 2, "color": "#333333"}),
              "lc": ("bridged LC", {"marker": "D", "ms": 5, "color": "#8c4a1c"}),
              "notch": ("cell notch", {"marker": "o", "ms": 7, "mfc": "none", "mew": 1.5, "color": "#1565c0"})}
    for kind, (label, style) in styles.items():
        if points[kind][0]:
            ax.plot(*points[kind], ls="none", label=label, **style)
    ax.set_xticks(range(1, len(cells) + 1))
    ax.set_xlim(0.5, max(len(cells), 1) + 0.5)
    ax.set_xlabel("cell", fontsize=8)
    ax.set_ylabel("GHz", fontsize=8)
    ax.tick_params(labelsize=7.5)
    rows = -(-len(ax.get_legend_handles_labels()[0]) // 2)
    ax.set_title("notch estimate per cell", fontsize=8.5, loc="left", pad=4 + 10 * rows)
    ax.legend(fontsize=7, loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=2, frameon=False, borderaxespad=0.2,
              handletextpad=0.4, labelspacing=0.3)
    ax.grid(True, lw=0.3, color="#cccccc")
