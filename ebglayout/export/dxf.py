"""DXF export with ezdxf: closed polylines per ring and role, real dimensions, and a notes block.

Drawing units are mm ($INSUNITS = 4, $MEASUREMENT = 1, metric); coordinates are
the board's own, so the drawing overlays the board 1:1.  Dimension texts (DIMLFAC,
DIMPOST) and the notes are written in the spec's own units.  Each ring (exterior and
holes) is one closed LWPOLYLINE, so a CAD user gets the filled area with the
even-odd rule.  Timestamps and GUIDs are frozen for byte-stable output.
"""
from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path
from typing import Iterator, Sequence

import ezdxf
from ezdxf.enums import MTextEntityAlignment, TextEntityAlignment

from ..layout import ROLES, Layout
from ..spec import FilterSpec
from ..units import LENGTH_UNITS_MM, format_length, in_units
from . import CAUTION, CellFrame, atomic_path

DXF_VERSION = "R2010"
INSUNITS_MM = 4
TRACE_ROLE = "trace"
ROLE_COLOURS = {"slot": 1, "patch": 3, "bridge": 6, "outline": 8, TRACE_ROLE: 5}
"""AutoCAD colour index per role: red slots, green patches, magenta bridges, grey outline, blue traces."""
DIMENSION_LAYER = ("EBG_DIMENSIONS", 7)
NOTES_LAYER = ("EBG_NOTES", 7)
FINDINGS_LAYER = ("EBG_FINDINGS", 1)
SEVERITY_COLOURS = {"error": 1, "warning": 30}
DIMSTYLE = "EBG_MM"


def dxf_layer_name(layer: str, role: str) -> str:
    """Our DXF layer for one board layer and role, e.g. ("In1.Cu", "slot") -> "EBG_In1.Cu_SLOT"."""
    return f"EBG_{layer}_{role.upper()}"


def dxf_layers(spec: FilterSpec) -> list[tuple[str, int]]:
    """Every DXF layer the writer creates, with its colour, in writing order."""
    layers = [(dxf_layer_name(plane, role), ROLE_COLOURS[role]) for plane in spec.plane_layers for role in ROLES]
    layers.append((dxf_layer_name(spec.pair_layer, TRACE_ROLE), ROLE_COLOURS[TRACE_ROLE]))
    return layers + [DIMENSION_LAYER, NOTES_LAYER, FINDINGS_LAYER]


def dxf_layer_names(spec: FilterSpec) -> list[str]:
    """Names only of ``dxf_layers``."""
    return [name for name, _ in dxf_layers(spec)]


@contextmanager
def _frozen_metadata() -> Iterator[None]:
    """Have ezdxf write fixed dates, GUIDs and version marker (its own documented switch for reproducible files)."""
    before = ezdxf.options.write_fixed_meta_data_for_testing
    ezdxf.options.write_fixed_meta_data_for_testing = True
    try:
        yield
    finally:
        ezdxf.options.write_fixed_meta_data_for_testing = before


def write_dxf(layout: Layout, path: str | Path, findings: Sequence = ()) -> Path:
    """Write the layout as a DXF drawing to ``path`` (atomically, byte-stable) and return the path."""
    path = Path(path)
    with _frozen_metadata():
        doc = build_document(layout, findings)
        with atomic_path(path) as tmp:
            doc.saveas(tmp)
    return path


def _sort_classes(doc: ezdxf.document.Drawing) -> None:
    """Put the CLASSES section in name order: ezdxf adds the classes of the entity types in use from a set,
    whose order follows Python's per-process string hash, so the same drawing could be written two ways."""
    doc.classes.add_required_classes(doc.dxfversion)
    doc.classes.classes = dict(sorted(doc.classes.classes.items()))


def build_document(layout: Layout, findings: Sequence = ()) -> ezdxf.document.Drawing:
    """The ezdxf document; call inside ``_frozen_metadata`` when the bytes must be stable."""
    spec = layout.spec
    doc = ezdxf.new(DXF_VERSION, units=INSUNITS_MM)  # no standard linetypes/styles/dimstyles: ours suffice
    doc.header["$INSUNITS"] = INSUNITS_MM
    doc.header["$MEASUREMENT"] = 1
    for name, colour in dxf_layers(spec):
        doc.layers.add(name, color=colour)
    msp = doc.modelspace()

    for cut in layout.cuts:
        for role in ROLES:
            attribs = {"layer": dxf_layer_name(cut.layer, role)}
            for poly in cut.role(role).geoms:
                for ring in (poly.exterior, *poly.interiors):
                    msp.add_lwpolyline(ring.coords[:-1], format="xy", close=True, dxfattribs=attribs)
    attribs = {"layer": dxf_layer_name(spec.pair_layer, TRACE_ROLE)}
    for trace in layout.traces:
        for ring in (trace.polygon.exterior, *trace.polygon.interiors):
            msp.add_lwpolyline(ring.coords[:-1], format="xy", close=True, dxfattribs=attribs)

    text_height = _text_height(layout)
    _add_dimensions(doc, layout, text_height)
    _add_findings(msp, findings, text_height)
    _add_notes(msp, layout, findings, text_height)
    _sort_classes(doc)
    return doc


def _text_height(layout: Layout) -> float:
    """Dimension text height scaled to the smallest patch side so labels stay readable but small."""
    smallest = min(min(c.size) for c in layout.cells) if layout.cells else 1.0
    return round(min(0.3, max(0.08, smallest / 12)), 3)


def _add_dimensions(doc, layout: Layout, text_height: float) -> None:
    """Aligned DIMENSIONs on the first cell: patch along/across, slot, web to the next cell, bridge width/length."""
    if not layout.cells:
        return
    h = text_height
    doc.dimstyles.add(DIMSTYLE, dxfattribs={
        "dimtxt": h, "dimasz": 0.6 * h, "dimexo": 0.3 * h, "dimexe": 0.5 * h, "dimgap": 0.3 * h,
        "dimdec": 4, "dimlunit": 2, "dimdsep": ord("."), "dimtad": 1, "dimzin": 8, "dimtih": 0,
        "dimtoh": 0, "dimtix": 0,
        "dimlfac": 1 / LENGTH_UNITS_MM[layout.spec.units], "dimpost": f"<> {layout.spec.units}",
    })
    msp = doc.modelspace()
    attribs = {"layer": DIMENSION_LAYER[0]}
    gap = 4 * h
    cell = layout.cells[0]
    frame = CellFrame(cell)
    pu0, pv0, pu1, pv1 = frame.local_bounds(cell.patch)
    ou0, ov0, ou1, ov1 = frame.local_bounds(cell.outer)
    local = frame.local_bounds

    def dim(p1, p2, distance):
        a, b = frame.board(*p1), frame.board(*p2)
        if b[0] - a[0] < -1e-9 or (abs(b[0] - a[0]) <= 1e-9 and b[1] < a[1]):
            a, b, distance = b, a, -distance  # keep the text upright: measure left to right (or upwards)
        msp.add_aligned_dim(a, b, distance, dimstyle=DIMSTYLE, dxfattribs=attribs).render()

    dim((pu0, pv0), (pu1, pv0), -(pv0 - ov0) - gap)
    dim((pu0, pv0), (pu0, pv1), (pu0 - ou0) + gap)
    bridge_us = sorted(local(b)[0] for b in cell.bridges)
    u_slot = (pu0 + bridge_us[0] - (ou1 - pu1)) / 2 if bridge_us else pu0 + (pu1 - pu0) / 4
    dim((u_slot, pv1), (u_slot, ov1), 0.0)
    if len(layout.cells) > 1:
        nu0, nv0, nu1, nv1 = local(layout.cells[1].outer)
        v = min(ov1, nv1)
        if nu0 > ou1 + 1e-9 and v > max(ov0, nv0):
            dim((ou1, v), (nu0, v), gap)
    if cell.bridges:
        bu0, bv0, bu1, bv1 = local(min(cell.bridges, key=lambda b: local(b)[:2]))
        far = bv1 if abs(bv1) > abs(bv0) else bv0
        dim((bu0, far), (bu1, far), gap if far > 0 else -gap)
        dim((bu1, bv0), (bu1, bv1), -gap)


def _add_findings(msp, findings: Sequence, text_height: float) -> None:
    """A circle and the rule id at each finding, red for errors and orange for warnings."""
    for f in sorted(findings, key=lambda f: (f.at, f.rule, f.severity, f.message)):
        colour = SEVERITY_COLOURS.get(f.severity, 7)
        attribs = {"layer": FINDINGS_LAYER[0], "color": colour}
        msp.add_circle(f.at, radius=text_height, dxfattribs=attribs)
        msp.add_text(f.rule, height=text_height, dxfattribs=attribs).set_placement(
            (f.at[0] + 1.2 * text_height, f.at[1] + 1.2 * text_height), align=TextEntityAlignment.BOTTOM_LEFT)


def notes_lines(layout: Layout, findings: Sequence = ()) -> list[str]:
    """The notes block as plain lines: spec values, crossings per trace, fab cautions and the compliance caution."""
    spec = layout.spec
    units = spec.units

    def _mm(value: float) -> str:
        return format_length(value, units, digits=6)

    sizes = ", ".join(f"{in_units(a, units):.6g} x {in_units(b, units):.6g}" for a, b in spec.patches)
    lines = [
        f"EBG CUT {spec.name} - drawing units and board coordinates mm; lengths in these notes in {units}",
        f"Style {spec.style}, {spec.count} cell(s); patch along x across ({units}): {sizes}",
        f"Slot {_mm(spec.slot)}; web {_mm(spec.web)}" + ("" if spec.style != "folded" else f"; {spec.passes} passes"),
    ]
    if spec.style == "bridged":
        lines.append(f"Bridges {_mm(spec.bridge_width)} wide x {_mm(spec.bridge_length)} long, "
                     f"{spec.bridges_per_side} per side")
    lines += [
        f"Pair on {spec.pair_layer}: width {_mm(spec.pair_width)}, spacing {_mm(spec.pair_spacing)}, "
        f"nets {spec.nets[0]} (P) / {spec.nets[1]} (N)",
        f"Cut on plane layer(s) {', '.join(spec.plane_layers)} (net {spec.plane_net}); "
        f"stack-up er {spec.er:g}, h {_mm(spec.h)}",
    ]
    if spec.target_hz:
        lines.append(f"Notch target {spec.target_hz / 1e9:.3f} GHz")
    for plane in spec.plane_layers:
        parts = []
        for trace in layout.traces:
            mine = [c for c in layout.crossings if c.layer == plane and c.polarity == trace.polarity]
            full = sum(c.kind == "full" for c in mine)
            other = f", {len(mine) - full} other" if len(mine) > full else ""
            parts.append(f"{trace.net} ({trace.polarity}) {full} full{other}")
        lines.append(f"Slot crossings on {plane}: " + "; ".join(parts))
    necks = [v for v in (spec.web or None, spec.bridge_width) if v]
    neck = min(necks) if necks else None
    lines.append(f"Fab: slot {_mm(spec.slot)} (fab least etch {_mm(spec.min_slot)}); "
                 + (f"narrowest copper neck {_mm(neck)} " if neck else "no webs or bridges ")
                 + f"(fab least copper {_mm(spec.min_copper)}).")
    lines.append("Plane fill: keep the slots as cut-outs of the plane zone and set the zone's minimum width below "
                 + (f"{_mm(neck)} " if neck else "the narrowest copper it must keep ")
                 + "or a refill removes webs/bridges and thin patch copper.")
    if findings:
        for f in sorted(findings, key=lambda f: (f.severity != "error", f.rule, f.at)):
            x, y = (in_units(c, units) for c in f.at)
            lines.append(f"{f.severity.upper()} {f.rule} at ({x:.6g}, {y:.6g}) {units}: {f.message}")
    lines.append("CAUTION: " + CAUTION)
    return lines


def _mtext_escape(text: str) -> str:
    return text.replace("\\", "\\\\").replace("{", "\\{").replace("}", "\\}")


def _add_notes(msp, layout: Layout, findings: Sequence, text_height: float) -> None:
    """The notes block (MTEXT) below the drawing, top-left corner at the left edge."""
    geoms = [c.outline for c in layout.cuts] + [t.polygon for t in layout.traces]
    x0 = min(g.bounds[0] for g in geoms)
    y0 = min(g.bounds[1] for g in geoms)
    content = "\\P".join(_mtext_escape(line) for line in notes_lines(layout, findings))
    mtext = msp.add_mtext(content, dxfattribs={"layer": NOTES_LAYER[0], "char_height": 1.2 * text_height})
    mtext.set_location((x0, y0 - 8 * text_height), attachment_point=MTextEntityAlignment.TOP_LEFT)
