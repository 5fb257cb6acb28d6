"""KiCad footprint for one filter: patch copper, rule areas and (bridged) a copper zone per plane layer.

The recipe makes KiCad's own zone fill reproduce the engine's slot exactly
(measured with KiCad 6.0.11 and 9.0.2, tests/test_kicad_fill.py):

* floating patch = ``fp_poly`` on the plane layer, stroke width 0, solid fill, no net;
* rule areas (copper pour not allowed, the other four flags allowed) whose union
  is the slot's outer edge, written as hole-free pieces; the pour stops exactly on
  their edges with sharp corners;
* the custom rule of ``rules.py`` drops the plane's clearance to the patch to 0 so
  that the rule area, not the clearance, defines the slot;
* bridged cells: patch and bridges form one copper zone inside the footprint with a
  tiny minimum width and the plane's net (given on insertion), so neither the
  plane's minimum width nor its island removal touches the bridges; the rule areas
  then cover only the slot.

Footprint-local frame: rotation 0, origin = ``at`` (default: the centre of the
cut's bounding box on the 1 um grid), so placing the footprint at that point
reproduces the board coordinates exactly.  Zones inside a footprint are written
in board coordinates (KiCad's convention in board files), everything else locally.
"""
from __future__ import annotations

import hashlib
import json
import uuid
from dataclasses import dataclass

import shapely
from shapely.geometry import MultiPolygon, Polygon, box
from shapely.ops import unary_union

from .. import CAUTION
from ..errors import SpecError
from ..layout import Layout
from .rules import AREA_PREFIX

KICAD6, KICAD7, KICAD8, KICAD9 = 20211014, 20221018, 20240108, 20241229
DIALECTS = (KICAD6, KICAD7, KICAD8, KICAD9)
LIBRARY = "ebglayout"
"""Library nickname written into the board form's footprint id."""

COURTYARD_MARGIN = 0.25
"""Courtyard clearance around the cut (KiCad library convention, common practice)."""
BRIDGE_ZONE_MIN_WIDTH = 0.005
"""Minimum width of the bridged copper zone: rounds its convex corners by < 2 um (measured, KiCad 6)."""
TEXT_SIZE, TEXT_THICKNESS = 0.5, 0.08
NM_PER_MM = 1_000_000


@dataclass(frozen=True)
class _Dialect:
    """Tokens that differ between KiCad 6, 7, 8 and 9 files (KiCad's file-format changes).

    Each dialect is loaded by a KiCad as new as it in tests/test_kicad_footprint.py
    (``test_each_dialect_loads_as_the_kicad6_text_where_kicad_reads_it``).
    """

    version: int

    @property
    def stroke(self) -> bool:
        return self.version >= KICAD7

    @property
    def uuid_token(self) -> str:
        return "uuid" if self.version >= KICAD8 else "tstamp"

    @property
    def properties(self) -> bool:
        return self.version >= KICAD8

    @property
    def yes_no(self) -> bool:
        return self.version >= KICAD8

    @property
    def fill_yes(self) -> bool:
        return self.version >= KICAD9

    @property
    def placement(self) -> bool:
        return self.version >= KICAD9


def _dialect(version: int) -> _Dialect:
    if version not in DIALECTS:
        raise SpecError("kicad.version", version, "must be one of " + ", ".join(str(v) for v in DIALECTS)
                        + " (KiCad 6, 7, 8, 9)")
    return _Dialect(version)


def _nm(value: float) -> int:
    return round(value * NM_PER_MM)


def _num(nm: int) -> str:
    """Integer nanometres as KiCad writes millimetres: shortest exact decimal."""
    sign = "-" if nm < 0 else ""
    whole, frac = divmod(abs(nm), NM_PER_MM)
    text = f"{whole}.{frac:06d}".rstrip("0").rstrip(".")
    return sign + text if text != "0" else "0"


def _mm(value: float) -> str:
    return _num(_nm(value))


def quote(text: str) -> str:
    """A KiCad S-expression string (double quotes, backslash escapes)."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'


def hole_free(geom) -> list[Polygon]:
    """Split polygons with holes into hole-free pieces whose union is the input.

    A hole is removed by cutting its polygon along a vertical line through the
    hole; KiCad rule areas drawn as plain pieces avoid a false keepout DRC error
    that polygons with holes gave (seen with KiCad 6.0.11's DRC; no test here measures it).
    """
    out: list[Polygon] = []
    stack = list(getattr(geom, "geoms", [geom]))
    while stack:
        poly = stack.pop()
        if poly.is_empty:
            continue
        if not poly.interiors:
            out.append(poly)
            continue
        hx0, _, hx1, _ = poly.interiors[0].bounds
        x = round((hx0 + hx1) / 2 * NM_PER_MM) / NM_PER_MM
        x0, y0, x1, y1 = poly.bounds
        for half in (box(x0 - 1, y0 - 1, x, y1 + 1), box(x, y0 - 1, x1 + 1, y1 + 1)):
            part = shapely.set_precision(poly.intersection(half), 1 / NM_PER_MM)
            stack.extend(p for p in getattr(part, "geoms", [part]) if isinstance(p, Polygon))
    return sorted(out, key=lambda p: (round(p.bounds[0], 6), round(p.bounds[1], 6), p.area))


def _ring_nm(poly: Polygon) -> list[tuple[int, int]]:
    """Exterior ring in integer nm, counter-clockwise in the y-down frame shapely sees, no repeated end point."""
    ring = shapely.geometry.polygon.orient(poly, 1.0).exterior.coords[:-1]
    return [(_nm(x), _nm(y)) for x, y in ring]


class _Writer:
    """Builds the S-expression text of one footprint in one dialect."""

    def __init__(self, layout: Layout, version: int, at: tuple[float, float] | None, board: bool,
                 reference: str, plane_net: tuple[int, str] | None, zone_priority: int):
        self.layout, self.d, self.board = layout, _dialect(version), board
        self.reference = reference
        self.plane_net = plane_net
        self.priority = zone_priority
        self.design: dict | None = None
        outlines = [c.outline for c in layout.cuts]
        if all(o.is_empty for o in outlines):
            raise SpecError("cut", "(empty)", "the layout has no plane cut to put into a footprint")
        x0, y0, x1, y1 = (float(v) for v in shapely.total_bounds(outlines))
        if at is None:
            at = (round((x0 + x1) / 2, 3), round((y0 + y1) / 2, 3))
        self.origin = (_nm(at[0]), _nm(at[1]))
        self.bounds = (x0, y0, x1, y1)
        self.seed = f"{layout.spec.name}|{reference}|{self.origin}|{version}|{board}"
        self.counter = 0

    # identity -------------------------------------------------------------
    def uid(self) -> str:
        """Deterministic UUID per item (byte-stable output; distinct per placement and reference)."""
        self.counter += 1
        digest = hashlib.sha1(f"{self.seed}|{self.counter}".encode()).digest()
        return str(uuid.UUID(bytes=digest[:16], version=5))

    def ident(self) -> str:
        u = self.uid()
        return f"({self.d.uuid_token} {quote(u) if self.d.yes_no else u})"

    # coordinates ------------------------------------------------------------
    def local(self, x_nm: int, y_nm: int) -> str:
        return f"{_num(x_nm - self.origin[0])} {_num(y_nm - self.origin[1])}"

    def absolute(self, x_nm: int, y_nm: int) -> str:
        return f"{_num(x_nm)} {_num(y_nm)}"

    def zone_xy(self, x_nm: int, y_nm: int) -> str:
        """Zones: board coordinates in a board file, footprint-local in a library file."""
        return self.absolute(x_nm, y_nm) if self.board else self.local(x_nm, y_nm)

    def pts(self, poly: Polygon, fmt, indent: str) -> str:
        pts = " ".join(f"(xy {fmt(x, y)})" for x, y in _ring_nm(poly))
        return f"{indent}(pts {pts})"

    # items --------------------------------------------------------------------
    def text(self, kind: str, value: str, x: float, y: float, layer: str, indent: str) -> str:
        effects = f"(effects (font (size {_mm(TEXT_SIZE)} {_mm(TEXT_SIZE)}) (thickness {_mm(TEXT_THICKNESS)})))"
        at = f"(at {_mm(x)} {_mm(y)}" + (" 0)" if self.d.properties else ")")
        if self.d.properties and kind in ("reference", "value"):
            name = "Reference" if kind == "reference" else "Value"
            return f"{indent}(property {quote(name)} {quote(value)} {at} (layer {quote(layer)}) {self.ident()}\n" \
                   f"{indent}  {effects})\n"
        if self.d.properties:
            return f"{indent}(fp_text user {quote(value)} {at} (layer {quote(layer)}) {self.ident()}\n" \
                   f"{indent}  {effects})\n"
        return f"{indent}(fp_text {kind} {quote(value)} {at} (layer {quote(layer)})\n" \
               f"{indent}  {effects} {self.ident()})\n"

    def stroke(self, width: float) -> str:
        if self.d.stroke:
            return f"(stroke (width {_mm(width)}) (type solid))"
        return f"(width {_mm(width)})"

    def fill(self, solid: bool) -> str:
        if self.d.fill_yes:
            return "(fill yes)" if solid else "(fill no)"
        return "(fill solid)" if solid else "(fill none)"

    def shape_tail(self, width: float, solid: bool, layer: str) -> str:
        if self.d.stroke:
            return f"{self.stroke(width)} {self.fill(solid)} (layer {quote(layer)}) {self.ident()}"
        return f"(layer {quote(layer)}) {self.stroke(width)} {self.fill(solid)} {self.ident()}"

    def courtyard(self, indent: str) -> str:
        x0, y0, x1, y1 = self.bounds
        m = COURTYARD_MARGIN
        s = self.local(_nm(x0 - m), _nm(y0 - m))
        e = self.local(_nm(x1 + m), _nm(y1 + m))
        return f"{indent}(fp_rect (start {s}) (end {e}) {self.shape_tail(0.05, False, 'F.CrtYd')})\n"

    def patch(self, poly: Polygon, layer: str, indent: str) -> str:
        return f"{indent}(fp_poly\n{self.pts(poly, self.local, indent + '  ')}\n" \
               f"{indent}  {self.shape_tail(0, True, layer)})\n"

    def layers_token(self, layers: tuple[str, ...]) -> str:
        if len(layers) == 1:
            return f"(layer {quote(layers[0])})"
        return "(layers " + " ".join(quote(name) for name in layers) + ")"

    def rule_area(self, poly: Polygon, layers: tuple[str, ...], name: str, indent: str) -> str:
        placement = " (placement (enabled no) (sheetname \"\"))" if self.d.placement else ""
        return (f"{indent}(zone (net 0) (net_name \"\") {self.layers_token(layers)} {self.ident()} "
                f"(name {quote(name)}) (hatch edge 0.5)\n"
                f"{indent}  (connect_pads (clearance 0)) (min_thickness 0.254) (filled_areas_thickness no)\n"
                f"{indent}  (keepout (tracks allowed) (vias allowed) (pads allowed) (copperpour not_allowed) "
                f"(footprints allowed)){placement}\n"
                f"{indent}  (fill (thermal_gap 0.5) (thermal_bridge_width 0.5))\n"
                f"{indent}  (polygon\n{self.pts(poly, self.zone_xy, indent + '    ')}))\n")

    def copper_zone(self, poly: Polygon, layer: str, name: str, indent: str) -> str:
        code, net = self.plane_net if self.plane_net else (0, "")
        return (f"{indent}(zone (net {code}) (net_name {quote(net)}) (layer {quote(layer)}) {self.ident()} "
                f"(name {quote(name)}) (hatch edge 0.5)\n"
                f"{indent}  (priority {self.priority})\n"
                f"{indent}  (connect_pads (clearance {_mm(self.layout.spec.slot)})) "
                f"(min_thickness {_mm(BRIDGE_ZONE_MIN_WIDTH)}) (filled_areas_thickness no)\n"
                f"{indent}  (fill (thermal_gap 0.5) (thermal_bridge_width 0.5))\n"
                f"{indent}  (polygon\n{self.pts(poly, self.zone_xy, indent + '    ')}))\n")

    # whole footprint ----------------------------------------------------------
    def body(self, indent: str) -> str:
        spec = self.layout.spec
        area = area_name(self.layout)
        bridged = spec.style == "bridged"
        _, y0, _, y1 = self.bounds
        ox, oy = self.origin[0] / NM_PER_MM, self.origin[1] / NM_PER_MM
        out = []
        names = ", ".join(c.layer for c in self.layout.cuts)
        needs = (f"Its patch zones need the {spec.plane_net} net (priority above the plane)" if bridged
                 else "Needs the ebglayout .kicad_dru rule")
        descr = (f"Plane cut of EBG common-mode filter {spec.name}: {spec.style}, {len(self.layout.cells)} cells, "
                 f"slot {spec.slot:g} mm on {names}. Place at ({_mm(ox)}, {_mm(oy)}) mm, rotation 0. "
                 f"{needs}; refill zones after placing. {CAUTION}.")
        out.append(f"{indent}(descr {quote(descr)})\n")
        out.append(f"{indent}(tags \"ebg common-mode filter plane cut\")\n")
        ref_y, val_y = y0 - oy - 0.6, y1 - oy + 0.6
        out.append(self.text("reference", self.reference, 0, ref_y, "F.Fab", indent)
                   if self.d.properties else "")
        out.append(self.text("value", spec.name, 0, val_y, "F.Fab", indent) if self.d.properties else "")
        out.append(f"{indent}(attr board_only exclude_from_pos_files exclude_from_bom)\n")
        if not self.d.properties:
            out.append(self.text("reference", self.reference, 0, ref_y, "F.Fab", indent))
            out.append(self.text("value", spec.name, 0, val_y, "F.Fab", indent))
        note = f"rule area {area}: no copper pour on {names} (plane cut)"
        if bridged:
            note += f"; zones {area}_patch* need the {spec.plane_net} net"
        out.append(self.text("user", note, 0, val_y + 0.8, "Cmts.User", indent))
        out.append(self.courtyard(indent))
        for cut in self.layout.cuts:
            if not bridged:
                for poly in hole_free(cut.patch):
                    out.append(self.patch(poly, cut.layer, indent))
        for geometry, layers in _group_layers(self.layout, "slot" if bridged else "outline"):
            for poly in hole_free(geometry):
                out.append(self.rule_area(poly, layers, area, indent))
        if bridged:
            for cut in self.layout.cuts:
                copper = unary_union([cut.patch, cut.bridge])
                for k, poly in enumerate(hole_free(copper)):
                    out.append(self.copper_zone(poly, cut.layer, f"{area}_patch{k + 1}", indent))
        return "".join(out)

    def library(self) -> str:
        spec = self.layout.spec
        if self.d.yes_no:
            head = (f"(footprint {quote(spec.name)} (version {self.d.version}) (generator \"pcbnew\") "
                    f"(generator_version \"{'8.0' if self.d.version == KICAD8 else '9.0'}\")\n"
                    f"  (locked yes)\n  (layer \"F.Cu\")\n")
        else:
            head = f"(footprint {quote(spec.name)} (version {self.d.version}) (generator pcbnew)\n" \
                   f"  locked (layer \"F.Cu\")\n"
            if self.d.version == KICAD6:
                head += "  (tedit 0)\n"
        return head + self.design_property("  ") + self.body("  ") + ")\n"

    def board_item(self) -> str:
        spec = self.layout.spec
        fp_id = quote(f"{LIBRARY}:{spec.name}")
        at = f"(at {self.absolute(*self.origin)})"
        if self.d.yes_no:
            head = f"  (footprint {fp_id} (locked yes) (layer \"F.Cu\") {self.ident()} {at}\n"
        elif self.d.version == KICAD6:
            head = f"  (footprint {fp_id} locked (layer \"F.Cu\")\n    (tedit 0) {self.ident()} {at}\n"
        else:
            head = f"  (footprint {fp_id} locked (layer \"F.Cu\") {self.ident()} {at}\n"
        return head + self.design_property("    ") + self.body("    ") + "  )\n"

    def design_property(self, indent: str) -> str:
        """The spec the filter was built from, as JSON in a footprint property, so a re-check can rebuild the design."""
        if self.design is None:
            return ""
        text = json.dumps(self.design, sort_keys=True, separators=(",", ":"), ensure_ascii=True, default=str)
        value = quote(text)
        if self.d.yes_no:  # KiCad 8+: properties carry position, layer and visibility (from memory of the 8.0 writer)
            return (f"{indent}(property {quote(DESIGN_PROPERTY)} {value} (at 0 0 0) (layer \"F.Fab\") (hide yes)\n"
                    f"{indent}  (effects (font (size 0.5 0.5) (thickness 0.08))))\n")
        return f"{indent}(property {quote(DESIGN_PROPERTY)} {value})\n"


def _group_layers(layout: Layout, role: str) -> list[tuple[MultiPolygon, tuple[str, ...]]]:
    """Plane layers with identical geometry share one multi-layer rule area."""
    groups: list[tuple[MultiPolygon, list[str]]] = []
    for cut in layout.cuts:
        geometry = cut.role(role)
        for known, names in groups:
            if known.equals(geometry):
                names.append(cut.layer)
                break
        else:
            groups.append((geometry, [cut.layer]))
    return [(g, tuple(names)) for g, names in groups]


DESIGN_PROPERTY = "ebglayout_spec"
"""Footprint property holding the spec (JSON) a placed filter was built from; `check --board` reads it back."""


def area_name(layout: Layout) -> str:
    """Name of the filter's rule areas; the custom rule selects graphics inside ``AREA_PREFIX*``."""
    return f"{AREA_PREFIX}{layout.spec.name}"


def footprint_origin(layout: Layout, at: tuple[float, float] | None = None) -> tuple[float, float]:
    """Board point the footprint must be placed at (rotation 0) to reproduce the layout's coordinates."""
    w = _Writer(layout, KICAD6, at, False, "FIL**", None, 1)
    return w.origin[0] / NM_PER_MM, w.origin[1] / NM_PER_MM


def footprint_text(layout: Layout, dialect: int = KICAD6, at: tuple[float, float] | None = None,
                   design: dict | None = None) -> str:
    """The filter as a footprint library file (.kicad_mod) in the given KiCad dialect.

    Bridged filters carry a copper zone with no net; give it the plane's net after
    placing (zone properties), or insert with ``board_footprint_text`` which writes it.
    ``design`` (the spec dict it was built from under a board's pair) goes into the
    ``DESIGN_PROPERTY`` that `check --board` reads back; the plugin places such a file.
    """
    writer = _Writer(layout, dialect, at, False, "FIL**", None, 1)
    writer.design = design
    return writer.library()


def board_footprint_text(layout: Layout, board_version: int = KICAD6, at: tuple[float, float] | None = None,
                         reference: str = "FIL1", plane_net: tuple[int, str] | None = None,
                         zone_priority: int = 1, design: dict | None = None) -> str:
    """The filter as a footprint block for a .kicad_pcb of ``board_version`` (insert with ``insert_footprints``).

    ``plane_net`` = (code, name) of the plane's net in that board, needed by bridged
    filters whose patch zone must join the plane; ``zone_priority`` must exceed the
    plane zone's priority (``insert.fill_risks`` reports it otherwise).
    """
    writer = _Writer(layout, board_version, at, True, reference, plane_net, zone_priority)
    writer.design = design
    return writer.board_item()
