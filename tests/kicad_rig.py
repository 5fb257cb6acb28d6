"""Test boards for KiCad's own zone fill, and measurement of what it filled.

``board_text`` writes a small KiCad 6 board by hand: 4 or 6 copper layers, a GND
plane zone on each cut layer (larger than the filter), one GND through-hole pad
as island anchor, an Edge.Cuts outline.  ``fill_board`` loads a saved board with
pcbnew, fills board zones and footprint copper zones (pcbnew's ZONE_FILLER) and returns
the copper per layer as shapely geometry; ``ray_gap`` and ``slot_report``
compare it with the engine's polygons.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import shapely
from shapely.geometry import LineString, MultiPolygon, Point, Polygon
from shapely.ops import unary_union

from ebglayout.layout import build_layout
from ebglayout.spec import spec_from_dict
from ebglayout.units import LENGTH_UNITS_MM

GND_CODE = 1


def shifted_layout(spec_dict: dict, dx: float, dy: float, name: str | None = None):
    """Build the layout of a sample spec moved by (dx, dy) mm (path and outline in the file's units)."""
    raw = {k: (dict(v) if isinstance(v, dict) else v) for k, v in spec_dict.items()}
    scale = LENGTH_UNITS_MM[raw.get("units", "mm")]
    sx, sy = dx / scale, dy / scale

    def move(p):
        return [p[0] + sx, p[1] + sy]

    path = []
    for item in raw["pair"]["path"]:
        path.append({"arc": [move(q) for q in item["arc"]]} if isinstance(item, dict) else move(item))
    raw["pair"]["path"] = path
    if "outline" in raw.get("plane", {}):
        raw["plane"]["outline"] = [move(p) for p in raw["plane"]["outline"]]
    if name:
        raw["name"] = name
    return build_layout(spec_from_dict(raw))


@dataclass
class Rig:
    """Settings of one test board."""

    copper_layers: int = 4
    plane_layers: tuple[str, ...] = ("In1.Cu",)
    plane: tuple[float, float, float, float] = (80.0, 80.0, 140.0, 140.0)
    zone_clearance: float = 0.5
    min_width: float = 0.254
    priority: int = 0
    island_mode: int | None = None
    anchor: tuple[float, float] = (84.0, 84.0)
    extra: list[str] = field(default_factory=list)


def _u(n: int) -> str:
    return f"00000000-0000-4000-8000-{n:012d}"


def board_text(rig: Rig) -> str:
    """A KiCad 6 board with the rig's GND planes and anchor pad, no filter yet."""
    inner = [f"In{k}.Cu" for k in range(1, rig.copper_layers - 1)]
    layers = ['    (0 "F.Cu" signal)'] + [f'    ({k} "{n}" signal)' for k, n in enumerate(inner, 1)]
    layers += ['    (31 "B.Cu" signal)', '    (36 "B.SilkS" user "B.Silkscreen")',
               '    (37 "F.SilkS" user "F.Silkscreen")', '    (38 "B.Mask" user)', '    (39 "F.Mask" user)',
               '    (41 "Cmts.User" user "User.Comments")', '    (44 "Edge.Cuts" user)',
               '    (46 "B.CrtYd" user "B.Courtyard")', '    (47 "F.CrtYd" user "F.Courtyard")',
               '    (48 "B.Fab" user)', '    (49 "F.Fab" user)']
    x0, y0, x1, y1 = rig.plane
    ax, ay = rig.anchor
    island = (f" (island_removal_mode {rig.island_mode}) (island_area_min 10)"
              if rig.island_mode is not None else "")
    prio = f"    (priority {rig.priority})\n" if rig.priority else ""
    zones = []
    for k, layer in enumerate(rig.plane_layers):
        zones.append(
            f'  (zone (net {GND_CODE}) (net_name "GND") (layer "{layer}") (tstamp {_u(100 + k)}) (name "GND_PLANE")'
            f' (hatch edge 0.508)\n{prio}'
            f'    (connect_pads (clearance {rig.zone_clearance})) (min_thickness {rig.min_width})'
            f' (filled_areas_thickness no)\n'
            f'    (fill (thermal_gap 0.5) (thermal_bridge_width 0.5){island})\n'
            f'    (polygon (pts (xy {x0} {y0}) (xy {x1} {y0}) (xy {x1} {y1}) (xy {x0} {y1})))\n  )\n')
    return (
        "(kicad_pcb (version 20211014) (generator pcbnew)\n\n"
        "  (general\n    (thickness 1.6)\n  )\n\n"
        '  (paper "A4")\n  (layers\n' + "\n".join(layers) + "\n  )\n\n"
        "  (setup\n    (pad_to_mask_clearance 0)\n  )\n\n"
        f'  (net 0 "")\n  (net {GND_CODE} "GND")\n\n'
        f'  (footprint "rig:anchor" (layer "F.Cu")\n    (tedit 0) (tstamp {_u(1)})\n    (at {ax} {ay})\n'
        f'    (fp_text reference "J1" (at 0 -1.5) (layer "F.Fab")\n'
        f'      (effects (font (size 0.5 0.5) (thickness 0.08))) (tstamp {_u(2)}))\n'
        f'    (fp_text value "anchor" (at 0 1.5) (layer "F.Fab")\n'
        f'      (effects (font (size 0.5 0.5) (thickness 0.08))) (tstamp {_u(3)}))\n'
        f'    (pad "1" thru_hole circle (at 0 0) (size 1.2 1.2) (drill 0.6) (layers *.Cu *.Mask)'
        f' (net {GND_CODE} "GND") (tstamp {_u(4)}))\n  )\n\n'
        f'  (gr_rect (start {x0 - 2} {y0 - 2}) (end {x1 + 2} {y1 + 2}) (layer "Edge.Cuts") (width 0.1)'
        f' (fill none) (tstamp {_u(5)}))\n\n'
        + "".join(zones) + "".join(rig.extra) + ")\n")


def orientation_degrees(footprint) -> float:
    """Footprint rotation in degrees: KiCad 6 returns tenths of a degree, 7+ an EDA_ANGLE (feature test, not version)."""
    if hasattr(footprint, "GetOrientationDegrees"):
        return float(footprint.GetOrientationDegrees())
    value = footprint.GetOrientation()
    return value.AsDegrees() if hasattr(value, "AsDegrees") else value / 10.0


def is_polygon_graphic(pcbnew, item) -> bool:
    """A footprint polygon: class MGRAPHIC in KiCad 6, PCB_SHAPE from 8 (from memory)."""
    return item.GetClass() in ("MGRAPHIC", "PCB_SHAPE", "FP_SHAPE") and item.GetShape() == pcbnew.SHAPE_T_POLY


def poly_set_to_shapely(pcbnew, poly_set, transform=None):
    """SHAPE_POLY_SET (nm) -> shapely geometry in mm, after unfracturing into outlines with holes."""
    ps = pcbnew.SHAPE_POLY_SET(poly_set)
    try:
        ps.Unfracture(pcbnew.SHAPE_POLY_SET.PM_FAST)
    except (AttributeError, TypeError):  # KiCad 8+: Unfracture() takes no mode (from memory)
        ps.Unfracture()

    def ring(chain):
        pts = [(chain.CPoint(k).x / 1e6, chain.CPoint(k).y / 1e6) for k in range(chain.PointCount())]
        return [transform(p) for p in pts] if transform else pts

    polys = []
    for i in range(ps.OutlineCount()):
        holes = [ring(ps.Hole(i, j)) for j in range(ps.HoleCount(i))]
        polys.append(Polygon(ring(ps.Outline(i)), holes))
    return shapely.make_valid(MultiPolygon(polys)) if polys else MultiPolygon()


@dataclass
class Filled:
    """What KiCad produced on one layer, in mm."""

    plane: object
    zones: object
    graphics: object

    @property
    def copper(self):
        return unary_union([self.plane, self.zones, self.graphics])


def fill_board(pcbnew, path: str, reference: str = "FIL1") -> tuple[dict[str, Filled], dict]:
    """Load a saved board, fill every zone, return per-layer copper and facts about our footprint.

    KiCad 6 returns a footprint polygon in footprint coordinates (class FP_SHAPE), 7 and later in board
    coordinates (checked with 6.0.11 and 9.0.2).  Footprint polygons count with their stroke (a filled
    polygon grows by half the stroke width; an unfilled one is only its stroked outline).
    """
    board = pcbnew.LoadBoard(str(path))
    ours = [fp for fp in board.GetFootprints() if fp.GetReference() == reference]
    fp_zones = fill_zones(pcbnew, board)
    facts = {"found": len(ours), "attributes": ours[0].GetAttributes() if ours else None,
             "locked": ours[0].IsLocked() if ours else None,
             "rule_areas": sum(1 for fp in ours for z in fp.Zones() if z.GetIsRuleArea()),
             "zone_nets": sorted({z.GetNetname() for z in fp_zones})}
    out: dict[str, Filled] = {}
    layer_names = {board.GetLayerName(k): k for k in range(pcbnew.PCB_LAYER_ID_COUNT)}
    for name, layer_id in layer_names.items():
        if not name.endswith(".Cu"):
            continue
        plane = []
        for z in board.Zones():
            if z.IsOnLayer(layer_id) and not z.GetIsRuleArea():
                plane.append(poly_set_to_shapely(pcbnew, z.GetFilledPolysList(layer_id)))
        zgeo = [poly_set_to_shapely(pcbnew, z.GetFilledPolysList(layer_id)) for z in fp_zones if z.IsOnLayer(layer_id)]
        graphics = []
        local_graphics = hasattr(pcbnew, "FP_SHAPE")  # KiCad 6 keeps footprint shapes in footprint coordinates
        for fp in board.GetFootprints():
            pos = fp.GetPosition()
            angle = math.radians(orientation_degrees(fp))
            c, s = math.cos(angle), math.sin(angle)
            px, py = pos.x / 1e6, pos.y / 1e6

            def to_board(p, c=c, s=s, px=px, py=py):
                return (px + p[0] * c + p[1] * s, py - p[0] * s + p[1] * c)

            for item in fp.GraphicalItems():
                polygon = is_polygon_graphic(pcbnew, item)
                if item.GetLayer() == layer_id and polygon:
                    shape = poly_set_to_shapely(pcbnew, item.GetPolyShape(), to_board if local_graphics else None)
                    half = item.GetWidth() / 2e6
                    if not item.IsFilled():
                        shape = shape.boundary.buffer(max(half, 1e-7))
                    elif half:
                        shape = shape.buffer(half)
                    graphics.append(shape)
        out[name] = Filled(_union(plane), _union(zgeo), _union(graphics))
    return out, facts


def fill_zones(pcbnew, board) -> list:
    """Fill board zones and footprint copper zones (ZONE_FILLER fills only what it is given); return the latter."""
    zones = pcbnew.ZONES()
    for zone in board.Zones():
        zones.append(zone)
    fp_zones = [z for fp in board.GetFootprints() for z in fp.Zones() if not z.GetIsRuleArea()]
    for zone in fp_zones:
        zones.append(zone)
    pcbnew.ZONE_FILLER(board).Fill(zones)
    return fp_zones


def drc_findings(pcbnew, path) -> list[str]:
    """KiCad's own DRC of a saved board with every zone filled: its findings, a line each, sorted, library warnings out.

    KiCad 9.0.2's ``WriteDRCReport`` applies the .kicad_dru only when a project file sits beside the board (6.0.11
    applies it without one; both checked here), so an empty project file is written first, as every KiCad project
    has one.  KiCad 9 also warns that the rig's footprint libraries are not in a library table: that is about this
    test set-up, not the board.
    """
    project = Path(path).with_suffix(".kicad_pro")
    if not project.exists():
        project.write_text("{}\n")
    board = pcbnew.LoadBoard(str(path))
    fill_zones(pcbnew, board)
    report = Path(path).with_suffix(".drc.rpt")
    millimetres = getattr(pcbnew, "EDA_UNITS_MM", None) or pcbnew.EDA_UNITS_MILLIMETRES  # name in 9 / in 6
    pcbnew.WriteDRCReport(board, str(report), millimetres, True)
    text = report.read_text()
    assert re.search(r"\*\* Found \d+ DRC violations \*\*", text), text
    findings = (line for line in text.splitlines() if line.startswith("["))
    return sorted(line for line in findings if not line.startswith("[lib_footprint_issues]"))


def _union(geoms):
    return unary_union(geoms) if geoms else MultiPolygon()


def ray_gap(void, start, direction, reach: float) -> float:
    """Length of the void piece that contains ``start`` along ``direction`` (mm); 0 if start is in copper."""
    dx, dy = direction
    n = math.hypot(dx, dy)
    dx, dy = dx / n, dy / n
    line = LineString([(start[0] - dx * 0.02, start[1] - dy * 0.02), (start[0] + dx * reach, start[1] + dy * reach)])
    inter = void.intersection(line)
    best, here = 0.0, Point(start)
    for piece in getattr(inter, "geoms", [inter]):
        if piece.length and piece.distance(here) < 0.004:
            best = max(best, piece.length)
    return best


def voids(layout, filled: Filled, layer: str):
    """(designed slot, measured void) inside a window around the cut on one layer."""
    cut = layout.cut(layer)
    window = cut.outline.buffer(0.3, join_style="mitre")
    measured = window.difference(filled.copper)
    designed = window.difference(unary_union([window.difference(cut.outline), cut.patch, cut.bridge]))
    return designed, measured


def edge_samples(layout, layer: str, fractions=(0.25, 0.5, 0.75)):
    """Points on the slot's boundary edges with the inward normal into the slot."""
    slot = layout.cut(layer).slot
    out = []
    for poly in slot.geoms:
        for ring in [poly.exterior, *poly.interiors]:
            coords = list(ring.coords)
            for (x0, y0), (x1, y1) in zip(coords, coords[1:]):
                length = math.hypot(x1 - x0, y1 - y0)
                if length < 0.02:
                    continue
                nx, ny = -(y1 - y0) / length, (x1 - x0) / length
                for f in fractions:
                    p = (x0 + f * (x1 - x0), y0 + f * (y1 - y0))
                    probe = Point(p[0] + nx * 1e-4, p[1] + ny * 1e-4)
                    normal = (nx, ny) if poly.contains(probe) else (-nx, -ny)
                    out.append((p, normal))
    return out


def convex_corners(geom):
    """Convex vertices of polygons with their outward bisector (for the 45-degree gap check)."""
    out = []
    for poly in getattr(geom, "geoms", [geom]):
        ring = list(shapely.geometry.polygon.orient(poly, 1.0).exterior.coords)[:-1]
        n = len(ring)
        for k in range(n):
            (ax, ay), (bx, by), (cx, cy) = ring[k - 1], ring[k], ring[(k + 1) % n]
            cross = (bx - ax) * (cy - by) - (by - ay) * (cx - bx)
            if cross <= 1e-12:
                continue
            u1 = (ax - bx, ay - by)
            u2 = (cx - bx, cy - by)
            l1, l2 = math.hypot(*u1), math.hypot(*u2)
            inward = (u1[0] / l1 + u2[0] / l2, u1[1] / l1 + u2[1] / l2)
            out.append(((bx, by), (-inward[0], -inward[1])))
    return out


def slot_report(layout, filled: Filled, layer: str) -> dict:
    """Compare KiCad's fill with the engine's slot on one layer (all lengths mm)."""
    designed, measured = voids(layout, filled, layer)
    slot = layout.spec.slot
    width_errors = []
    for p, normal in edge_samples(layout, layer):
        want = ray_gap(designed, p, normal, 4 * slot)
        got = ray_gap(measured, p, normal, 4 * slot)
        width_errors.append((abs(got - want), want, p))
    corner_errors = []
    for p, outward in convex_corners(layout.cut(layer).patch):
        want = ray_gap(designed, p, outward, 4 * slot)
        got = ray_gap(measured, p, outward, 4 * slot)
        corner_errors.append((abs(got - want), want, got, p))
    return {
        "symdiff": designed.symmetric_difference(measured).area,
        "slot_area": designed.area,
        "hausdorff": designed.hausdorff_distance(measured),
        "width_errors": width_errors,
        "corner_errors": corner_errors,
        "designed": designed,
        "measured": measured,
    }


def spec_variant(base: Path, folder: Path, name: str, **tables) -> Path:
    """A copy of the spec ``base`` with whole tables replaced (``plane={...}``) or dropped (``stackup=None``)."""
    import json
    import tomllib

    raw = tomllib.loads(Path(base).read_text())
    for key, table in tables.items():
        raw.pop(key, None) if table is None else raw.__setitem__(key, table)

    def value(v) -> str:
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{a} = {value(b)}" for a, b in v.items()) + " }"
        if isinstance(v, list):
            return "[" + ", ".join(value(b) for b in v) + "]"
        return json.dumps(v)

    lines = [f"{k} = {value(v)}" for k, v in raw.items() if not isinstance(v, dict)]
    for table, values in ((k, v) for k, v in raw.items() if isinstance(v, dict)):
        lines.append(f"[{table}]")
        lines += [f"{k} = {value(v)}" for k, v in values.items()]
    path = Path(folder) / f"{name}.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


def placed_slot_reports(pcbnew, path) -> list[tuple[str, str, dict]]:
    """(reference, layer, ``slot_report``) for every placed filter on a saved board, after KiCad's own fill.

    Each filter is rebuilt from the design its footprint carries (property ebglayout_spec).
    """
    from ebglayout.kicad.board import read_board
    from ebglayout.kicad.recheck import placed_designs

    out = []
    for footprint, design in placed_designs(read_board(path)):
        filled, facts = fill_board(pcbnew, str(path), reference=footprint.reference)
        assert facts["found"] == 1 and facts["locked"]
        layout = build_layout(spec_from_dict(design))
        out += [(footprint.reference, cut.layer, slot_report(layout, filled[cut.layer], cut.layer))
                for cut in layout.cuts]
    return out


def assert_exact_slots(report: dict) -> None:
    """KiCad's fill leaves the designed slot: widths and 45-degree corner gaps within 5 um, area within 1 %."""
    assert max(e[0] for e in report["width_errors"]) <= 0.005
    assert max(e[0] for e in report["corner_errors"]) <= 0.005  # sharp: the 45-degree gap is slot * sqrt(2)
    assert report["symdiff"] <= 0.01 * report["slot_area"]
