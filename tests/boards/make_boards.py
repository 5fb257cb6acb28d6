"""Regenerate the KiCad test boards and the bundled sample board of the fictional Halyard HX2 sensor hub.

Boards written by KiCad itself (needs the pcbnew module of KiCad 6.0.x):
  samples/hx2_hub.kicad_pcb           4 layers, three pairs, GND plane zone on In1.Cu, +3V3 plane on In2.Cu
  tests/boards/hx2_stripline6.kicad_pcb 6 layers, a stripline pair on In2.Cu between GND planes on In1.Cu and In3.Cu
Boards written as text after KiCad 8-10's file-format changes (KiCad's developer docs, from memory; no pcbnew
needed), laid out the way KiCad 8+ writes (one list per line, tab indents):
  tests/boards/hx2_v8.kicad_pcb, hx2_v9.kicad_pcb, hx2_v10.kicad_pcb
Item uuids come from KiCad's generator seeded with a constant, so rerunning gives the same bytes.

Run:  cd /work/main && python3 tests/boards/make_boards.py   (pcbnew is found in Debian's dist-packages
when the Python minor version matches).  The pair tables below are the design truth the tests compare the
reader with: each trace is its pair's centre-line offset by +-(width + spacing)/2 with mitred corners and
concentric arcs, rounded to KiCad's 1 nm grid.  Positive offsets lie to the left of travel in the math frame
(x right, y up), i.e. on the +y side for travel along +x; in KiCad's view (y down) that is the right-hand side.
"""
from __future__ import annotations

import math
import re
import shutil
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent.parent
SAMPLE = ROOT / "samples" / "hx2_hub.kicad_pcb"
STRIPLINE = HERE / "hx2_stripline6.kicad_pcb"

# A path is a list of ("line", a, b) and ("arc", a, mid, b) pieces, each starting where the last ended.
SAMPLE_PAIRS = {
    "HX2_L0_TX": {
        "nets": ("HX2_L0_TX_P", "HX2_L0_TX_N"), "layer": "F.Cu", "width": 0.12, "spacing": 0.15,
        "path": [("line", (97.465, 90.0), (125.0, 90.0)), ("line", (125.0, 90.0), (128.0, 93.0)),
                 ("line", (128.0, 93.0), (128.0, 112.0))],
        # Uncoupled lead-ins from the connector pads; each ends on its trace's first straight.
        "lead_in": {"P": [(97.0, 90.6)], "N": [(96.5, 89.2), (97.165, 89.865)]},
        "split_at_x": 110.0,
    },
    "HX2_L1_RX": {
        "nets": ("HX2_L1_RX_P", "HX2_L1_RX_N"), "layer": "F.Cu", "width": 0.10, "spacing": 0.20,
        "path": [("line", (100.0, 100.0), (120.0, 100.0)),
                 ("arc", (120.0, 100.0), (120.0 + 5 * math.sqrt(0.5), 105.0 - 5 * math.sqrt(0.5)), (125.0, 105.0)),
                 ("line", (125.0, 105.0), (125.0, 120.0))],
    },
    "HX2_USB_D": {
        "nets": ("HX2_USB_D+", "HX2_USB_D-"), "layer": "B.Cu", "width": 0.20, "spacing": 0.20,
        "path": [("line", (100.0, 118.0), (112.0, 118.0)), ("line", (112.0, 118.0), (114.0, 120.0)),
                 ("line", (114.0, 120.0), (114.0, 126.0))],
    },
}
SAMPLE_OUTLINE = (90.0, 80.0, 160.0, 130.0, 2.0)
"""Board edge: x0, y0, x1, y1 and the corner radius (gr_line + gr_arc on Edge.Cuts)."""
SAMPLE_STACKUP = """    (stackup
      (layer "F.SilkS" (type "Top Silk Screen"))
      (layer "F.Paste" (type "Top Solder Paste"))
      (layer "F.Mask" (type "Top Solder Mask") (thickness 0.01))
      (layer "F.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 1" (type "prepreg") (thickness 0.1) (material "FR4") (epsilon_r 3.9) (loss_tangent 0.02))
      (layer "In1.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 2" (type "core") (thickness 0.1) (material "FR4") (epsilon_r 4.1) (loss_tangent 0.02))
      (layer "In2.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 3" (type "prepreg") (thickness 0.5) (material "FR4") (epsilon_r 4.2) (loss_tangent 0.02)
        addsublayer (thickness 0.7) (material "FR4") (epsilon_r 4.6) (loss_tangent 0.01))
      (layer "B.Cu" (type "copper") (thickness 0.035))
      (layer "B.Mask" (type "Bottom Solder Mask") (thickness 0.01))
      (layer "B.Paste" (type "Bottom Solder Paste"))
      (layer "B.SilkS" (type "Bottom Silk Screen"))
      (copper_finish "None")
      (dielectric_constraints no)
    )
"""

STRIPLINE_PAIRS = {
    "HX2_L3_RX": {
        "nets": ("HX2_L3_RX_DP", "HX2_L3_RX_DN"), "layer": "In2.Cu", "width": 0.1, "spacing": 0.15,
        "path": [("line", (20.0, 20.0), (40.0, 20.0)), ("line", (40.0, 20.0), (44.0, 16.0)),
                 ("line", (44.0, 16.0), (60.0, 16.0))],
    },
}
STRIPLINE_STACKUP = """    (stackup
      (layer "F.Mask" (type "Top Solder Mask") (thickness 0.01))
      (layer "F.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 1" (type "prepreg") (thickness 0.1) (material "FR4") (epsilon_r 3.9) (loss_tangent 0.02))
      (layer "In1.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 2" (type "core") (thickness 0.127) (material "FR4") (epsilon_r 3.6) (loss_tangent 0.01))
      (layer "In2.Cu" (type "copper") (thickness 0.018))
      (layer "dielectric 3" (type "prepreg") (thickness 0.127) (material "FR4") (epsilon_r 3.6) (loss_tangent 0.01))
      (layer "In3.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 4" (type "core") (thickness 0.8) (material "FR4") (epsilon_r 4.5) (loss_tangent 0.02))
      (layer "In4.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 5" (type "prepreg") (thickness 0.1) (material "FR4") (epsilon_r 4.1) (loss_tangent 0.02))
      (layer "B.Cu" (type "copper") (thickness 0.035))
      (layer "B.Mask" (type "Bottom Solder Mask") (thickness 0.01))
      (copper_finish "None")
      (dielectric_constraints no)
    )
"""


# ---- pure geometry: the design truth, independent of the package under test ----

def arc_centre(a, m, b):
    """Centre of the circle through three points (circumcentre formula)."""
    (ax, ay), (mx, my), (bx, by) = a, m, b
    d = 2 * (ax * (my - by) + mx * (by - ay) + bx * (ay - my))
    ux = ((ax**2 + ay**2) * (my - by) + (mx**2 + my**2) * (by - ay) + (bx**2 + by**2) * (ay - my)) / d
    uy = ((ax**2 + ay**2) * (bx - mx) + (mx**2 + my**2) * (ax - bx) + (bx**2 + by**2) * (mx - ax)) / d
    return ux, uy


def offset_path(path, d):
    """Offset pieces by d (left of travel, math frame): lines shift, arcs stay concentric, line corners mitre."""
    out = []
    for piece in path:
        if piece[0] == "line":
            (ax, ay), (bx, by) = piece[1], piece[2]
            length = math.hypot(bx - ax, by - ay)
            nx, ny = -(by - ay) / length * d, (bx - ax) / length * d
            out.append(["line", (ax + nx, ay + ny), (bx + nx, by + ny)])
        else:
            a, m, b = piece[1:]
            cx, cy = arc_centre(a, m, b)
            ccw = (m[0] - a[0]) * (b[1] - a[1]) - (m[1] - a[1]) * (b[0] - a[0]) > 0
            r = math.hypot(a[0] - cx, a[1] - cy)
            scale = (r - d if ccw else r + d) / r
            out.append(["arc"] + [(cx + (p[0] - cx) * scale, cy + (p[1] - cy) * scale) for p in (a, m, b)])
    for k in range(1, len(out)):
        prev, cur = out[k - 1], out[k]
        if prev[0] == "line" and cur[0] == "line":
            corner = _meet(prev[1], prev[2], cur[1], cur[2])
            prev[2] = cur[1] = corner
    return out


def _meet(a1, b1, a2, b2):
    d1 = (b1[0] - a1[0], b1[1] - a1[1])
    d2 = (b2[0] - a2[0], b2[1] - a2[1])
    den = d1[0] * d2[1] - d1[1] * d2[0]
    if abs(den) < 1e-15:
        return b1
    t = ((a2[0] - a1[0]) * d2[1] - (a2[1] - a1[1]) * d2[0]) / den
    return (a1[0] + t * d1[0], a1[1] + t * d1[1])


def trace_pieces(pair, polarity):
    """Pieces of one trace: lead-in segments, then the offset path (first vertex replaced by the lead-in end)."""
    d = (pair["width"] + pair["spacing"]) / 2 * (1 if polarity == "P" else -1)
    pieces = offset_path(pair["path"], d)
    lead = pair.get("lead_in", {}).get(polarity, [])
    if lead:
        first = pieces[0]
        if len(lead) > 1 and math.dist(lead[-1], first[1]) > 1e-9:
            first[1] = lead[-1]
            lead = lead[:-1]
        pts = list(lead) + [first[1]]
        pieces = [["line", a, b] for a, b in zip(pts, pts[1:])] + pieces
    split = pair.get("split_at_x")
    if split is not None and polarity == "P":
        out = []
        for piece in pieces:
            (ax, ay), (bx, by) = piece[1], piece[-1]
            if piece[0] == "line" and abs(ay - by) < 1e-12 and min(ax, bx) < split < max(ax, bx):
                out += [["line", (ax, ay), (split, ay)], ["line", (split, ay), (bx, by)]]
            else:
                out.append(piece)
        pieces = out
    return pieces


# ---- KiCad boards written by pcbnew ----

def load_pcbnew():
    try:
        import pcbnew
    except ImportError:
        sys.path.append("/usr/lib/python3/dist-packages")
        import pcbnew
    return pcbnew


class Maker:
    """Thin helper over pcbnew for building a board in mm: KiCad 6 (the committed boards) and 9 (tests).

    The calls that changed between them are chosen by what the running pcbnew accepts (checked with 6.0.11
    and 9.0.2): positions and sizes as wxPoint/wxSize (6) or VECTOR2I (7+), footprint zones as FP_ZONE (6)
    or ZONE, SetPriority or SetAssignedPriority, a pad's SetPos0 (6 only), Flip's side argument.
    """

    def __init__(self, pcbnew, copper_layers, seed=1):
        self.k = pcbnew
        # SWIG's signature text tells which position type this pcbnew takes; a probe item changed the uuids of the
        # regenerated boards
        if "VECTOR2I" in (pcbnew.PCB_TRACK.SetStart.__doc__ or ""):
            self.point = self.size_type = pcbnew.VECTOR2I
        else:
            self.point, self.size_type = pcbnew.wxPoint, pcbnew.wxSize
        pcbnew.KIID.SeedGenerator(seed)  # item uuids from a seeded generator: regenerated files come out the same
        self.board = pcbnew.BOARD()
        self.board.SetCopperLayerCount(copper_layers)
        self.nets = {}

    def pt(self, x, y):
        return self.point(self.k.FromMM(x), self.k.FromMM(y))

    def size(self, w, h):
        return self.size_type(self.k.FromMM(w), self.k.FromMM(h))

    def layer(self, name):
        return self.board.GetLayerID(name)

    def net(self, name):
        if name not in self.nets:
            info = self.k.NETINFO_ITEM(self.board, name)
            self.board.Add(info)
            self.nets[name] = info
        return self.nets[name]

    def segment(self, a, b, width, layer, net):
        t = self.k.PCB_TRACK(self.board)
        t.SetStart(self.pt(*a))
        t.SetEnd(self.pt(*b))
        t.SetWidth(self.k.FromMM(width))
        t.SetLayer(self.layer(layer))
        t.SetNet(self.net(net))
        self.board.Add(t)

    def arc(self, a, m, b, width, layer, net):
        t = self.k.PCB_ARC(self.board)
        t.SetStart(self.pt(*a))
        t.SetMid(self.pt(*m))
        t.SetEnd(self.pt(*b))
        t.SetWidth(self.k.FromMM(width))
        t.SetLayer(self.layer(layer))
        t.SetNet(self.net(net))
        self.board.Add(t)

    def via(self, at, size, drill, net, layers=("F.Cu", "B.Cu")):
        v = self.k.PCB_VIA(self.board)
        if layers != ("F.Cu", "B.Cu"):
            v.SetViaType(self.k.VIATYPE_BLIND_BURIED)
        v.SetPosition(self.pt(*at))
        v.SetWidth(self.k.FromMM(size))
        v.SetDrill(self.k.FromMM(drill))
        v.SetLayerPair(self.layer(layers[0]), self.layer(layers[1]))
        v.SetNet(self.net(net))
        self.board.Add(v)

    def pair(self, pair):
        for polarity, net in zip("PN", pair["nets"]):
            for piece in trace_pieces(pair, polarity):
                if piece[0] == "line":
                    self.segment(piece[1], piece[2], pair["width"], pair["layer"], net)
                else:
                    self.arc(piece[1], piece[2], piece[3], pair["width"], pair["layer"], net)

    def zone(self, layer, net, rings, name="", priority=0, clearance=0.3, min_width=0.2, parent=None, keepout=None,
             island="always"):
        k = self.k
        z = getattr(k, "FP_ZONE", k.ZONE)(parent) if parent is not None else k.ZONE(self.board)
        z.SetLayer(self.layer(layer))
        if net:
            z.SetNetCode(self.net(net).GetNetCode())
        z.SetZoneName(name)
        (getattr(z, "SetAssignedPriority", None) or z.SetPriority)(priority)
        z.SetLocalClearance(k.FromMM(clearance))
        z.SetMinThickness(k.FromMM(min_width))
        z.SetIslandRemovalMode({"always": k.ISLAND_REMOVAL_MODE_ALWAYS, "never": k.ISLAND_REMOVAL_MODE_NEVER,
                                "area": k.ISLAND_REMOVAL_MODE_AREA}[island])
        if island == "area":
            z.SetMinIslandArea(int(2.0 * 1e6 * 1e6))
        if keepout is not None:
            z.SetIsRuleArea(True)
            z.SetDoNotAllowCopperPour("copperpour" in keepout)
            z.SetDoNotAllowTracks("tracks" in keepout)
            z.SetDoNotAllowVias("vias" in keepout)
            z.SetDoNotAllowPads("pads" in keepout)
            z.SetDoNotAllowFootprints("footprints" in keepout)
        outline = z.Outline()
        outline.NewOutline()
        for x, y in rings[0]:
            outline.Append(k.FromMM(x), k.FromMM(y))
        for hole in rings[1:]:
            outline.NewHole()
            for x, y in hole:
                outline.Append(k.FromMM(x), k.FromMM(y), -1, 0)
        (parent or self.board).Add(z)
        return z

    def footprint(self, ref, lib, at, rotation, pads, flip=False):
        """pads: (number, kind, shape, local (x, y), (w, h), drill or None, net)."""
        k = self.k
        fp = k.FOOTPRINT(self.board)
        fp.SetFPID(k.LIB_ID(*lib.split(":")))
        fp.SetReference(ref)
        fp.SetValue(lib.split(":")[1])
        fp.SetLayer(k.F_Cu)
        self.board.Add(fp)
        for number, kind, shape, local, size, drill, net in pads:
            pad = k.PAD(fp)
            pad.SetNumber(number)
            pad.SetAttribute({"smd": k.PAD_ATTRIB_SMD, "thru_hole": k.PAD_ATTRIB_PTH}[kind])
            pad.SetShape({"rect": k.PAD_SHAPE_RECT, "circle": k.PAD_SHAPE_CIRCLE, "oval": k.PAD_SHAPE_OVAL}[shape])
            pad.SetSize(self.size(*size))
            if drill:
                pad.SetDrillSize(self.size(drill, drill))
            pad.SetLayerSet(k.PAD.PTHMask() if kind == "thru_hole" else k.PAD.SMDMask())
            if hasattr(pad, "SetPos0"):
                pad.SetPos0(self.pt(*local))
            pad.SetPosition(self.pt(*local))  # the footprint is still at the origin
            if net:
                pad.SetNet(self.net(net))
            fp.Add(pad)
        fp.SetPosition(self.pt(*at))
        if rotation:
            fp.SetOrientationDegrees(rotation)
        if flip:
            fp.Flip(fp.GetPosition(), getattr(k, "FLIP_DIRECTION_TOP_BOTTOM", False))
        return fp

    def edge_rect(self, x0, y0, x1, y1, r):
        k = self.k

        def shape(kind):
            s = k.PCB_SHAPE(self.board)
            s.SetShape(kind)
            s.SetLayer(k.Edge_Cuts)
            s.SetWidth(k.FromMM(0.05))
            self.board.Add(s)
            return s

        for a, b in (((x0 + r, y0), (x1 - r, y0)), ((x1, y0 + r), (x1, y1 - r)),
                     ((x1 - r, y1), (x0 + r, y1)), ((x0, y1 - r), (x0, y0 + r))):
            s = shape(k.SHAPE_T_SEGMENT)
            s.SetStart(self.pt(*a))
            s.SetEnd(self.pt(*b))
        if r:
            c = r * (1 - math.sqrt(0.5))
            for (ax, ay), (mx, my), (bx, by) in (
                    ((x0, y0 + r), (x0 + c, y0 + c), (x0 + r, y0)), ((x1 - r, y0), (x1 - c, y0 + c), (x1, y0 + r)),
                    ((x1, y1 - r), (x1 - c, y1 - c), (x1 - r, y1)), ((x0 + r, y1), (x0 + c, y1 - c), (x0, y1 - r))):
                s = shape(k.SHAPE_T_ARC)
                s.SetArcGeometry(self.pt(ax, ay), self.pt(mx, my), self.pt(bx, by))

    def save_filled(self, target: Path, stackup: str):
        """Save, add the stack-up text, reload (creates the DRC engine), fill every copper zone, save again."""
        k = self.k
        with tempfile.TemporaryDirectory() as tmp:
            first = Path(tmp, "first.kicad_pcb")
            k.SaveBoard(str(first), self.board)
            text = first.read_text()
            text = text.replace("  (setup\n", "  (setup\n" + stackup, 1)
            first.write_text(text)
            board = k.LoadBoard(str(first))
            zones = k.ZONES()
            for z in board.Zones():
                if not z.GetIsRuleArea():
                    zones.append(z)
            for fp in board.GetFootprints():
                for z in fp.Zones():
                    if not z.GetIsRuleArea():
                        zones.append(z)
            k.ZONE_FILLER(board).Fill(zones)
            second = Path(tmp, "second.kicad_pcb")
            k.SaveBoard(str(second), board)
            shutil.copyfile(second, target)


def make_sample(pcbnew):
    m = Maker(pcbnew, 4)
    b = m.board
    b.SetLayerType(m.layer("In1.Cu"), pcbnew.LT_POWER)
    b.SetLayerType(m.layer("In2.Cu"), pcbnew.LT_POWER)
    x0, y0, x1, y1, r = SAMPLE_OUTLINE
    m.edge_rect(x0, y0, x1, y1, r)
    for name in ("GND", "+3V3"):
        m.net(name)
    for pair in SAMPLE_PAIRS.values():
        m.pair(pair)
    m.segment((105.0, 84.0), (140.0, 84.0), 0.15, "F.Cu", "HX2_SPI_SCK")
    m.via((140.0, 84.0), 0.45, 0.2, "HX2_SPI_SCK")
    m.segment((140.0, 84.0), (140.0, 110.0), 0.15, "B.Cu", "HX2_SPI_SCK")
    m.segment((110.0, 86.0), (110.0, 95.0), 0.15, "B.Cu", "HX2_IRQ")
    m.via((110.0, 95.0), 0.45, 0.2, "HX2_IRQ")
    m.segment((110.0, 95.0), (113.0, 95.0), 0.15, "F.Cu", "HX2_IRQ")
    for at in ((95.0, 85.0), (150.0, 124.0), (132.0, 96.0)):
        m.via(at, 0.6, 0.3, "GND")
    m.footprint("J1", "HX2:Edge_Lane", (96.75, 90.0), 0, [
        ("1", "smd", "rect", (0.25, 0.6), (0.3, 0.3), None, "HX2_L0_TX_P"),
        ("2", "smd", "rect", (-0.25, -0.8), (0.3, 0.3), None, "HX2_L0_TX_N")])
    m.footprint("TP1", "HX2:TP_GND", (95.0, 125.0), 0, [("1", "thru_hole", "circle", (0, 0), (1.6, 1.6), 0.8, "GND")])
    m.footprint("TP2", "HX2:TP_3V3", (155.0, 85.0), 0, [("1", "thru_hole", "circle", (0, 0), (1.6, 1.6), 0.8, "+3V3")])
    m.footprint("U2", "HX2:Sensor_2pad", (145.0, 115.0), 30, [
        ("1", "smd", "rect", (-1.0, 0.0), (0.8, 1.2), None, "HX2_IRQ"),
        ("2", "smd", "oval", (1.0, 0.5), (0.8, 1.2), None, "GND")])
    m.footprint("C7", "HX2:C_0402", (150.0, 100.0), 90, [
        ("1", "smd", "rect", (-0.5, 0.0), (0.6, 0.6), None, "+3V3"),
        ("2", "smd", "rect", (0.5, 0.0), (0.6, 0.6), None, "GND")], flip=True)
    keep = m.footprint("KO1", "HX2:Keepout_2x2", (144.0, 102.0), 0, [])
    m.zone("In1.Cu", None, [[(143.0, 101.0), (145.0, 101.0), (145.0, 103.0), (143.0, 103.0)]], name="KO1_RA",
           parent=keep, keepout=("copperpour",))
    inset = 1.0
    rect = [(x0 + inset, y0 + inset), (x1 - inset, y0 + inset), (x1 - inset, y1 - inset), (x0 + inset, y1 - inset)]
    m.zone("In1.Cu", "GND", [rect], name="GND_PLANE", clearance=0.3, min_width=0.2)
    hole = [(150.0, 90.0), (156.0, 90.0), (156.0, 95.0), (150.0, 95.0)]
    m.zone("In2.Cu", "+3V3", [rect, hole], name="3V3_PLANE", clearance=0.3, min_width=0.2, island="never")
    m.save_filled(SAMPLE, SAMPLE_STACKUP)


def make_stripline(pcbnew):
    m = Maker(pcbnew, 6)
    m.edge_rect(0.0, 0.0, 80.0, 40.0, 0.0)
    for pair in STRIPLINE_PAIRS.values():
        m.pair(pair)
    m.segment((30.0, 25.0), (30.0, 35.0), 0.12, "In2.Cu", "HX2_CLK")  # ends short of the pair: a crossing is a short
    m.segment((50.0, 10.0), (50.0, 30.0), 0.12, "In4.Cu", "HX2_CLK")
    m.via((30.0, 35.0), 0.3, 0.15, "HX2_CLK", layers=("In2.Cu", "In4.Cu"))
    m.via((35.0, 22.0), 0.5, 0.25, "GND")
    m.footprint("TP1", "HX2:TP_GND", (5.0, 5.0), 0, [("1", "thru_hole", "circle", (0, 0), (1.6, 1.6), 0.8, "GND")])
    m.footprint("R3", "HX2:R_0402", (70.0, 30.0), 45, [
        ("1", "smd", "rect", (-0.5, 0.0), (0.6, 0.6), None, "HX2_CLK"),
        ("2", "smd", "rect", (0.5, 0.0), (0.6, 0.6), None, "GND")], flip=True)
    rect = [(1.0, 1.0), (79.0, 1.0), (79.0, 39.0), (1.0, 39.0)]
    m.zone("In1.Cu", "GND", [rect], name="GND_TOP", clearance=0.25, min_width=0.15)
    m.zone("In3.Cu", "GND", [rect], name="GND_BOTTOM", clearance=0.25, min_width=0.15, priority=1, island="area")
    m.save_filled(STRIPLINE, STRIPLINE_STACKUP)


# ---- boards in newer dialects, written as text from the format notes ----

_V_HEAD = {
    8: '(kicad_pcb (version 20240108) (generator "pcbnew") (generator_version "8.0")',
    9: '(kicad_pcb (version 20241229) (generator "pcbnew") (generator_version "9.0")',
    10: '(kicad_pcb (version 20260206) (generator "pcbnew") (generator_version "10.0")',
}


def newer_dialect_board(version: int) -> str:
    """A small 4-layer board in the 8, 9 or 10 dialect: uuid, property, yes/no booleans, stroke, layer numbers of 9+."""
    pair = SAMPLE_PAIRS["HX2_L1_RX"]
    v9 = version >= 9
    numbers = {"F.Cu": 0, "B.Cu": 2, "In1.Cu": 4, "In2.Cu": 6, "Edge.Cuts": 25} if v9 else \
        {"F.Cu": 0, "In1.Cu": 1, "In2.Cu": 2, "B.Cu": 31, "Edge.Cuts": 44}
    nets = ["", "GND", pair["nets"][0], pair["nets"][1], "HX2_SPI_SCK"]
    uid = iter(f'"{i:08x}-0000-4000-8000-{i:012x}"' for i in range(1, 1000))

    def net(name):
        return f'(net "{name}")' if version >= 10 else f"(net {nets.index(name)})"

    layer_lines = [f'    ({numbers[n]} "{n}" {"power" if n.startswith("In") else "signal"})'
                   for n in sorted(numbers, key=numbers.get) if n.endswith(".Cu")]
    layer_lines.append(f'    ({numbers["Edge.Cuts"]} "Edge.Cuts" user)')
    out = [_V_HEAD[version], "  (general (thickness 1.6) (legacy_teardrops no))", '  (paper "A4")',
           "  (layers", *layer_lines, "  )",
           "  (setup", SAMPLE_STACKUP.rstrip(), "    (pad_to_mask_clearance 0)",
           "    (allow_soldermask_bridges_in_footprints no)", "    (tenting front back)" if v9 else "", "  )"]
    if version < 10:
        out += [f'  (net {i} "{n}")' for i, n in enumerate(nets)]
    fill = "(fill yes)" if v9 else "(fill solid)"
    out += [
        f'  (footprint "HX2:TP_GND" (layer "F.Cu") (uuid {next(uid)}) (at 95 125 0)',
        f'    (property "Reference" "TP1" (at 0 -2 0) (layer "F.SilkS") (uuid {next(uid)})',
        "      (effects (font (size 1 1) (thickness 0.15))))",
        f'    (property "Value" "TP_GND" (at 0 2 0) (layer "F.Fab") (hide yes) (uuid {next(uid)})',
        "      (effects (font (size 1 1) (thickness 0.15))))",
        "    (attr through_hole dnp)",
        f'    (fp_poly (pts (xy -1 -1) (xy 1 -1) (xy 1 1) (xy -1 1)) (stroke (width 0) (type solid)) {fill} '
        f'(layer "F.CrtYd") (uuid {next(uid)}))',
        f'    (pad "1" thru_hole circle (at 0 0) (size 1.6 1.6) (drill 0.8) (layers "*.Cu" "*.Mask") '
        f'(remove_unused_layers no) {net("GND")} (uuid {next(uid)}))',
        "    (embedded_fonts no)" if v9 else "",
        "  )",
    ]
    x0, y0, x1, y1, _ = SAMPLE_OUTLINE
    out.append(f'  (gr_rect (start {x0} {y0}) (end {x1} {y1}) (stroke (width 0.05) (type default)) '
               f'(fill {"no" if v9 else "none"}) (layer "Edge.Cuts") (uuid {next(uid)}))')
    for polarity, name in zip("PN", pair["nets"]):
        for piece in trace_pieces(pair, polarity):
            pts = " ".join(f"({tag} {p[0]:.6f} {p[1]:.6f})" for tag, p in
                           zip(("start", "end") if piece[0] == "line" else ("start", "mid", "end"), piece[1:]))
            kind = "segment" if piece[0] == "line" else "arc"
            out.append(f'  ({kind} {pts} (width {pair["width"]}) (layer "{pair["layer"]}") {net(name)} '
                       f"(uuid {next(uid)}))")
    out.append(f'  (segment (start 105 84) (end 140 84) (width 0.15) (locked yes) (layer "F.Cu") {net("HX2_SPI_SCK")} '
               f"(uuid {next(uid)}))")
    out.append(f'  (via (at 140 84) (size 0.45) (drill 0.2) (layers "F.Cu" "B.Cu") {net("HX2_SPI_SCK")} '
               f"(uuid {next(uid)}))")
    out.append(f'  (via (at 95 85) (size 0.6) (drill 0.3) (layers "F.Cu" "B.Cu") (free yes) {net("GND")} '
               f"(uuid {next(uid)}))")
    rect = f"(xy {x0 + 1} {y0 + 1}) (xy {x1 - 1} {y0 + 1}) (xy {x1 - 1} {y1 - 1}) (xy {x0 + 1} {y1 - 1})"
    zone_net = net("GND") + ("" if version >= 10 else ' (net_name "GND")')
    out += [
        f'  (zone {zone_net} (layer "In1.Cu") (uuid {next(uid)}) (name "GND_PLANE") (hatch edge 0.5)',
        "    (connect_pads (clearance 0.3)) (min_thickness 0.2) (filled_areas_thickness no)",
        "    (fill yes (thermal_gap 0.5) (thermal_bridge_width 0.5) (island_removal_mode 1))",
        f"    (polygon (pts {rect}))",
        f'    (filled_polygon (layer "In1.Cu") {"(island yes) " if version >= 10 else ""}(pts {rect}))',
        "  )",
        f'  (zone (layers "In2.Cu" "B.Cu") (uuid {next(uid)}) (name "NO_POUR") (hatch edge 0.5)',
        "    (connect_pads (clearance 0)) (min_thickness 0.25)",
        "    (keepout (tracks allowed) (vias allowed) (pads allowed) (copperpour not_allowed) (footprints allowed))",
        "    (placement (enabled no) (sheetname \"\"))" if v9 else "",
        "    (fill (thermal_gap 0.5) (thermal_bridge_width 0.5))",
        "    (polygon (pts (xy 140 100) (xy 150 100) (arc (start 150 100) (mid 152 104) (end 150 108)) (xy 140 108)))",
        "  )",
        '  (embedded_fonts no)' if v9 else "",
        ")",
    ]
    return "\n".join(line for line in out if line) + "\n"


def pair_board_text(pairs: dict, order_seed: int | None = None, reverse_n: bool = False) -> str:
    """A minimal KiCad 6 board holding the given pairs (and a GND plane on In1.Cu), written as text.

    ``order_seed`` shuffles the track items (KiCad saves them in uuid order, not
    path order); ``reverse_n`` writes the N trace from its far end.
    """
    import random

    nets = list(dict.fromkeys([""] + [n for pair in pairs.values() for n in pair["nets"]] + ["GND"]))
    items = []
    for pair in pairs.values():
        for polarity, name in zip("PN", pair["nets"]):
            pieces = trace_pieces(pair, polarity)
            if reverse_n and polarity == "N":
                pieces = [[p[0], *reversed(p[1:])] for p in reversed(pieces)]
            for piece in pieces:
                pts = " ".join(f"({tag} {round(p[0], 6)!r} {round(p[1], 6)!r})" for tag, p in
                               zip(("start", "end") if piece[0] == "line" else ("start", "mid", "end"), piece[1:]))
                kind = "segment" if piece[0] == "line" else "arc"
                items.append(f'  ({kind} {pts} (width {pair["width"]}) (layer "{pair["layer"]}") '
                             f"(net {nets.index(name)}) (tstamp 00000000-0000-0000-0000-{len(items):012d}))")
    if order_seed is not None:
        random.Random(order_seed).shuffle(items)
    head = ['(kicad_pcb (version 20211014) (generator pcbnew)', "  (general (thickness 1.6))", '  (paper "A4")',
            "  (layers", '    (0 "F.Cu" signal)', '    (1 "In1.Cu" power)', '    (2 "In2.Cu" signal)',
            '    (31 "B.Cu" signal)', '    (44 "Edge.Cuts" user)', "  )", "  (setup", SAMPLE_STACKUP.rstrip(), "  )"]
    head += [f'  (net {i} "{n}")' for i, n in enumerate(nets)]
    zone = ['  (zone (net {0}) (net_name "GND") (layer "In1.Cu") (tstamp 00000000-0000-0000-0000-999999999999) '
            '(hatch edge 0.508)'.format(nets.index("GND")),
            "    (connect_pads (clearance 0.3)) (min_thickness 0.2)",
            "    (fill (thermal_gap 0.5) (thermal_bridge_width 0.5))",
            "    (polygon (pts (xy -500 -500) (xy 500 -500) (xy 500 500) (xy -500 500))))"]
    return "\n".join(head + items + zone + [")"]) + "\n"


def kicad8_layout(text: str) -> str:
    """Re-indent one-line-per-item text the way KiCad 8+ writes files: one list per line, tab indents,
    lists that hold only atoms kept on one line.  A tiny stand-alone parser, independent of the reader."""
    tokens = re.findall(r'"(?:[^"\\]|\\.)*"|[()]|[^\s()"]+', text)
    stack: list[list] = [[]]
    for tok in tokens:
        if tok == "(":
            stack.append([])
        elif tok == ")":
            done = stack.pop()
            stack[-1].append(done)
        else:
            stack[-1].append(tok)
    (root,) = stack[0]

    def emit(node, depth):
        if not any(isinstance(c, list) for c in node):
            return "\t" * depth + "(" + " ".join(node) + ")"
        head = node[:next(i for i, c in enumerate(node) if isinstance(c, list))]
        lines = ["\t" * depth + "(" + " ".join(head)]
        lines += [emit(c, depth + 1) if isinstance(c, list) else "\t" * (depth + 1) + c
                  for c in node[len(head):]]
        return "\n".join(lines + ["\t" * depth + ")"])

    return emit(root, 0) + "\n"


def main():
    for version in (8, 9, 10):
        (HERE / f"hx2_v{version}.kicad_pcb").write_text(kicad8_layout(newer_dialect_board(version)))
    pcbnew = load_pcbnew()
    make_sample(pcbnew)
    make_stripline(pcbnew)
    for path in (SAMPLE, STRIPLINE):
        text = path.read_text()
        if not re.search(r"\(filled_polygon", text):
            raise SystemExit(f"{path}: zones were not filled")
        print(f"wrote {path} ({len(text)} bytes)")


if __name__ == "__main__":
    main()
