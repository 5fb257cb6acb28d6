"""The .kicad_pcb reader, checked against KiCad's own loader (pcbnew) on boards KiCad wrote.

Reference: pcbnew 6.0.x LoadBoard on the same file; coordinates compared on
KiCad's 1 nm grid.  Boards: the bundled sample, the 6-layer test board, a board
pcbnew builds and saves inside the test from seeded random items, and boards in
the 8/9/10 dialects written from KiCad's token notes (tests/boards/make_boards.py).
"""
from __future__ import annotations

import importlib.util
import math
import random
import re
from pathlib import Path

import numpy as np
import pytest

from ebglayout.errors import BoardError, EbgError
from ebglayout.kicad.board import parse_board, read_board
from ebglayout.kicad.board_zones import KEEPOUT_DEFAULT_ALLOWED
from ebglayout.kicad.sexpr import MAX_DEPTH, parse_text, scan

HERE = Path(__file__).resolve().parent
BOARDS = HERE / "boards"
SAMPLE = HERE.parent / "samples" / "hx2_hub.kicad_pcb"
STRIPLINE = BOARDS / "hx2_stripline6.kicad_pcb"


def _load_generator():
    spec = importlib.util.spec_from_file_location("make_boards", BOARDS / "make_boards.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


make_boards = _load_generator()


def nm(v: float) -> int:
    return int(round(v * 1e6))


# ---- what pcbnew sees, and what we see, in the same shape ----

def pcbnew_view(k, path: Path) -> dict:
    b = k.LoadBoard(str(path))
    name = b.GetLayerName
    view = {"copper": [name(i) for i in k.LSET.AllCuMask(b.GetCopperLayerCount()).CuStack()],
            "nets": sorted(str(n) for n in b.GetNetsByName().keys()),
            "segments": [], "arcs": [], "vias": [], "pads": [], "footprints": [], "zones": []}
    via_kind = {k.VIATYPE_THROUGH: "through", k.VIATYPE_BLIND_BURIED: "blind", k.VIATYPE_MICROVIA: "micro"}
    for t in b.GetTracks():
        cls = t.GetClass()
        if cls == "PCB_VIA":
            view["vias"].append((t.GetPosition().x, t.GetPosition().y, t.GetWidth(), t.GetDrillValue(),
                                 name(t.TopLayer()), name(t.BottomLayer()), via_kind[t.GetViaType()], t.GetNetname()))
        elif cls == "PCB_ARC":
            view["arcs"].append((t.GetStart().x, t.GetStart().y, t.GetMid().x, t.GetMid().y, t.GetEnd().x, t.GetEnd().y,
                                 t.GetWidth(), t.GetLayerName(), t.GetNetname()))
        else:
            view["segments"].append((t.GetStart().x, t.GetStart().y, t.GetEnd().x, t.GetEnd().y, t.GetWidth(),
                                     t.GetLayerName(), t.GetNetname()))
    zones = [(z, None) for z in b.Zones()]
    for fp in b.GetFootprints():
        pos = fp.GetPosition()
        view["footprints"].append((fp.GetReference(), str(fp.GetFPIDAsString()), pos.x, pos.y,
                                   round(fp.GetOrientationDegrees() % 360, 6), name(fp.GetLayer())))
        for p in fp.Pads():
            drill = p.GetDrillSize().x or None
            view["pads"].append((fp.GetReference(), p.GetNumber(), p.GetPosition().x, p.GetPosition().y,
                                 p.GetSize().x, p.GetSize().y, drill, p.GetNetname()))
        zones += [(z, fp.GetReference()) for z in fp.Zones()]
    for z, ref in zones:
        outline = z.Outline()
        layers = tuple(name(i) for i in z.GetLayerSet().Seq())
        filled = sum(z.GetFilledPolysList(i).Area() for i in z.GetLayerSet().Seq()) / 1e12 if z.IsFilled() else 0.0
        keepout = None
        if z.GetIsRuleArea():
            keepout = {"tracks": not z.GetDoNotAllowTracks(), "vias": not z.GetDoNotAllowVias(),
                       "pads": not z.GetDoNotAllowPads(), "copperpour": not z.GetDoNotAllowCopperPour(),
                       "footprints": not z.GetDoNotAllowFootprints()}
        modes = {k.ISLAND_REMOVAL_MODE_ALWAYS: "always", k.ISLAND_REMOVAL_MODE_NEVER: "never",
                 k.ISLAND_REMOVAL_MODE_AREA: "area"}
        view["zones"].append({
            "name": z.GetZoneName(), "layers": layers, "net": z.GetNetname(), "footprint": ref,
            "area": round(outline.Area() / 1e12, 6), "holes": outline.HoleCount(0), "priority": (getattr(z, "GetAssignedPriority", None) or z.GetPriority)(),
            "min_thickness": z.GetMinThickness(), "clearance": z.GetLocalClearance(), "keepout": keepout,
            "island": modes[z.GetIslandRemovalMode()], "filled": round(filled, 6)})
    outline = k.SHAPE_POLY_SET()
    view["outline_area"] = outline.Area() / 1e12 if b.GetBoardPolygonOutlines(outline) else None
    return view


def our_view(board) -> dict:
    names, layers = board.nets, board.copper_layers
    seg, arc, via = board.segments, board.arcs, board.vias
    view = {"copper": list(layers), "nets": sorted(names), "segments": [], "arcs": [], "vias": [], "pads": [],
            "footprints": [], "zones": []}
    for i in range(len(seg)):
        view["segments"].append((*map(nm, (*seg.start[i], *seg.end[i], seg.width[i])), layers[seg.layer[i]],
                                 names[seg.net[i]]))
    for i in range(len(arc)):
        view["arcs"].append((*map(nm, (*arc.start[i], *arc.mid[i], *arc.end[i], arc.width[i])),
                             layers[arc.layer[i]], names[arc.net[i]]))
    for i in range(len(via)):
        view["vias"].append((*map(nm, (*via.at[i], via.size[i], via.drill[i])), layers[via.layers[i, 0]],
                             layers[via.layers[i, 1]], via.kind[i], names[via.net[i]]))
    for fp in board.footprints:
        view["footprints"].append((fp.reference, fp.lib_id, nm(fp.at[0]), nm(fp.at[1]), round(fp.rotation % 360, 6),
                                   fp.layer))
        for p in fp.pads:
            view["pads"].append((fp.reference, p.number, nm(p.at[0]), nm(p.at[1]), nm(p.size[0]), nm(p.size[1]),
                                 nm(p.drill) if p.drill else None, p.net_name))
    for z in board.zones:
        view["zones"].append({
            "name": z.name, "layers": z.layers, "net": z.net_name, "footprint": z.footprint,
            "area": round(z.outline.area, 6), "holes": len(z.rings) - 1, "priority": z.priority,
            "min_thickness": nm(z.min_thickness), "clearance": nm(z.clearance), "keepout": z.keepout,
            "island": z.island_removal, "filled": round(board.zone_fill(z).area, 6)})
    return view


def compare_views(ours: dict, theirs: dict) -> None:
    assert ours["copper"] == theirs["copper"]
    assert ours["nets"] == theirs["nets"]
    for key in ("segments", "arcs", "vias", "pads", "footprints"):
        assert sorted(ours[key], key=repr) == sorted(theirs[key], key=repr), key
    key = lambda z: (z["name"], z["layers"], z["net"])  # noqa: E731
    ours_z, theirs_z = sorted(ours["zones"], key=key), sorted(theirs["zones"], key=key)
    assert len(ours_z) == len(theirs_z)
    for a, b in zip(ours_z, theirs_z):
        filled_a, filled_b = a.pop("filled"), b.pop("filled")
        assert a == b
        assert filled_a == pytest.approx(filled_b, abs=1e-6)


# ---- against KiCad's loader ----

@pytest.mark.parametrize("path", [SAMPLE, STRIPLINE], ids=lambda p: p.name)
def test_board_matches_pcbnew(pcbnew, path):
    board = read_board(path)
    theirs = pcbnew_view(pcbnew, path)
    ours = our_view(board)
    compare_views(ours, theirs)
    # pcbnew turns the outline arcs into polygons with its own (coarser) error; 0.01 % of the area covers it
    assert board.outline.area == pytest.approx(theirs["outline_area"], rel=1e-4)
    assert not board.warnings



def test_keepout_flags_left_out_are_read_as_kicad_reads_them(pcbnew, tmp_path):
    """A rule area whose (keepout) names no flag: our defaults (KEEPOUT_DEFAULT_ALLOWED) against pcbnew's reading."""
    text = SAMPLE.read_text(encoding="utf-8")
    flags = "(keepout (tracks allowed) (vias allowed) (pads allowed) (copperpour not_allowed) (footprints allowed))"
    assert text.count(flags) == 1
    path = tmp_path / "keepout_defaults.kicad_pcb"
    path.write_text(text.replace(flags, "(keepout)"), encoding="utf-8")
    board = read_board(path)
    compare_views(our_view(board), pcbnew_view(pcbnew, path))
    assert next(z for z in board.zones if z.is_rule_area).keepout == KEEPOUT_DEFAULT_ALLOWED

def test_pad_positions_without_parsing_footprints(pcbnew):
    """The fast pad scan agrees with the parsed footprints and with pcbnew."""
    board = read_board(SAMPLE)
    fast = sorted((nm(x), nm(y)) for x, y in board.pads.at)
    theirs = sorted((p[2], p[3]) for p in pcbnew_view(pcbnew, SAMPLE)["pads"])
    parsed = sorted((nm(p.at[0]), nm(p.at[1])) for fp in board.footprints for p in fp.pads)
    assert fast == theirs == parsed


def test_random_board_saved_by_pcbnew(pcbnew, tmp_path):
    """pcbnew builds a board from seeded random items (odd net names included), saves it, and both loaders agree."""
    rng = random.Random(20240611)
    m = make_boards.Maker(pcbnew, 6)
    m.edge_rect(0.0, 0.0, 60.0, 40.0, 3.0)
    layers = ["F.Cu", "In1.Cu", "In2.Cu", "In3.Cu", "In4.Cu", "B.Cu"]
    nets = ["GND", 'Net-(U1-Pad"3")', "A\\B", "HX2_L5_TX+", "HX2_L5_TX-", "/sheet 1/µ-signal"]
    for _ in range(60):
        a = (round(rng.uniform(1, 59), 4), round(rng.uniform(1, 39), 4))
        b = (round(rng.uniform(1, 59), 4), round(rng.uniform(1, 39), 4))
        m.segment(a, b, round(rng.uniform(0.08, 0.5), 3), rng.choice(layers), rng.choice(nets))
    for _ in range(8):
        cx, cy, r = rng.uniform(10, 50), rng.uniform(10, 30), rng.uniform(1, 5)
        t0, dt = rng.uniform(0, 6.28), rng.uniform(0.3, 2.5) * rng.choice((-1, 1))
        pts = [(cx + r * math.cos(t0 + dt * f), cy + r * math.sin(t0 + dt * f)) for f in (0, 0.5, 1)]
        m.arc(*pts, 0.15, rng.choice(layers), rng.choice(nets))
    for _ in range(10):
        top, bottom = sorted(rng.sample(range(6), 2))
        m.via((rng.uniform(2, 58), rng.uniform(2, 38)), 0.5, 0.25, rng.choice(nets), (layers[top], layers[bottom]))
    for i in range(4):
        m.footprint(f"U{i + 1}", "HX2:Quad", (rng.uniform(10, 50), rng.uniform(10, 30)), rng.choice((0, 30, 90, 135)), [
            ("1", "smd", "rect", (-1.0, -0.5), (0.6, 0.4), None, rng.choice(nets)),
            ("2", "smd", "oval", (1.0, -0.5), (0.6, 0.4), None, rng.choice(nets)),
            ("3", "thru_hole", "circle", (0.0, 1.2), (1.2, 1.2), 0.6, "GND")], flip=bool(i % 2))
    m.zone("In1.Cu", "GND", [[(1, 1), (59, 1), (59, 39), (1, 39)], [(20, 15), (30, 15), (30, 25), (20, 25)]],
           name="GND_A", island="never")
    m.zone("In3.Cu", "GND", [[(1, 1), (59, 1), (59, 39), (1, 39)]], name="GND_B", priority=2, island="area")
    path = tmp_path / "random.kicad_pcb"
    m.save_filled(path, make_boards.STRIPLINE_STACKUP)
    board = read_board(path)
    compare_views(our_view(board), pcbnew_view(pcbnew, path))
    assert {'Net-(U1-Pad"3")', "A\\B", "/sheet 1/µ-signal"} <= set(board.nets)


def test_round_trip_through_pcbnew_keeps_everything(pcbnew, tmp_path):
    """A file pcbnew re-saves (its own writer, its own item order) reads the same."""
    copy = tmp_path / "resaved.kicad_pcb"
    pcbnew.SaveBoard(str(copy), pcbnew.LoadBoard(str(SAMPLE)))
    a, b = our_view(read_board(SAMPLE)), our_view(read_board(copy))
    for key in ("segments", "arcs", "vias", "pads", "footprints"):
        assert sorted(a[key], key=repr) == sorted(b[key], key=repr)
    assert read_board(copy).stackup == read_board(SAMPLE).stackup


# ---- content checks that need no KiCad ----

def test_stackup_and_layers_of_sample():
    board = read_board(SAMPLE)
    assert board.version == 20211014 and board.copper_layers == ("F.Cu", "In1.Cu", "In2.Cu", "B.Cu")
    st = board.stackup
    assert [(d.above, d.below) for d in st.dielectrics] == [
        ("F.Cu", "In1.Cu"), ("In1.Cu", "In2.Cu"), ("In2.Cu", "B.Cu")]
    assert st.between("In1.Cu", "In2.Cu") == pytest.approx((0.1, 4.1))
    # Series dielectrics (stacked parallel-plate capacitors): er = h / sum(h_i / er_i).
    thick = st.dielectrics[2]
    assert thick.thickness == pytest.approx(1.2)
    assert thick.epsilon_r == pytest.approx(1.2 / (0.5 / 4.2 + 0.7 / 4.6))
    h, er = st.between("F.Cu", "In2.Cu")
    assert h == pytest.approx(0.1 + 0.035 + 0.1)
    assert er == pytest.approx(0.2 / (0.1 / 4.1 + 0.1 / 3.9))
    # Loss tangent in series: complex permittivity er (1 - j tan d) per slab, h / e = sum(h_i / e_i), first order
    # in tan d gives tan d = sum(h_i tan_i / er_i) / sum(h_i / er_i) (series capacitors; see series_loss_tangent).
    # The two sub-layers of dielectric 3 carry 0.02 and 0.01.
    weights = (0.5 / 4.2, 0.7 / 4.6)
    assert thick.loss_tangent == pytest.approx((weights[0] * 0.02 + weights[1] * 0.01) / sum(weights), rel=1e-12)
    assert st.loss_tangent("In1.Cu", "In2.Cu") == pytest.approx(0.02)
    whole = (0.1 / 3.9, 0.1 / 4.1, *weights)
    assert st.loss_tangent("F.Cu", "B.Cu") == pytest.approx(
        (0.02 * (whole[0] + whole[1] + whole[2]) + 0.01 * whole[3]) / sum(whole), rel=1e-12)
    # Independent check of the first-order formula: the exact series value of complex permittivities.
    exact = sum(h / complex(e, -e * t) for h, e, t in ((0.5, 4.2, 0.02), (0.7, 4.6, 0.01)))
    exact = 1.2 / exact
    assert thick.loss_tangent == pytest.approx(-exact.imag / exact.real, rel=1e-3)


def test_keepout_zone_inside_footprint_and_zone_with_hole():
    board = read_board(SAMPLE)
    ko = next(z for z in board.zones if z.is_rule_area)
    assert ko.footprint == "KO1" and ko.layers == ("In1.Cu",)
    assert ko.keepout == {"tracks": True, "vias": True, "pads": True, "copperpour": False, "footprints": True}
    plane = next(z for z in board.zones if z.name == "3V3_PLANE")
    assert len(plane.outline.interiors) == 1 and plane.island_removal == "never"
    assert plane.outline.area == pytest.approx(68 * 48 - 6 * 5)


@pytest.mark.parametrize("version", [8, 9, 10])
def test_newer_dialects(version):
    """Boards in the 8/9/10 syntax: uuid, property, yes/no booleans, stroke, layer numbers of 9, net names of 10."""
    board = read_board(BOARDS / f"hx2_v{version}.kicad_pcb")
    assert board.copper_layers == ("F.Cu", "In1.Cu", "In2.Cu", "B.Cu")
    assert set(board.nets) == {"", "GND", "HX2_L1_RX_P", "HX2_L1_RX_N", "HX2_SPI_SCK"}
    assert len(board.segments) == 5 and len(board.arcs) == 2 and len(board.vias) == 2
    pair = make_boards.SAMPLE_PAIRS["HX2_L1_RX"]
    expected = sorted((nm(p[1][0]), nm(p[1][1]), nm(p[-1][0]), nm(p[-1][1]))
                      for pol in "PN" for p in make_boards.trace_pieces(pair, pol) if p[0] == "line")
    seg = board.segments
    got = sorted((nm(a[0]), nm(a[1]), nm(b[0]), nm(b[1])) for a, b, n in zip(seg.start, seg.end, seg.net)
                 if board.nets[n] != "HX2_SPI_SCK")
    assert got == expected
    (fp,) = board.footprints
    assert fp.reference == "TP1" and fp.pads[0].net_name == "GND" and fp.pads[0].copper == board.copper_layers
    plane, rule = board.zones
    assert plane.net_name == "GND" and plane.island_removal == "never" and plane.fill_spans
    assert rule.layers == ("In2.Cu", "B.Cu") and rule.keepout["copperpour"] is False
    # the rule area's outline has an arc bulging to x = 152: discretised, not dropped
    assert rule.outline.bounds[2] == pytest.approx(152.0, abs=1e-3)
    assert board.outline.area == pytest.approx(70 * 50)
    assert board.stackup == read_board(SAMPLE).stackup
    assert not board.warnings


def test_spans_and_splice_keep_every_other_byte():
    board = read_board(SAMPLE)
    assert len(board.items) == len(board.heads)
    for (a, b), head in zip(board.items.tolist(), board.heads):
        assert board.data[a:b].startswith(b"(" + head.encode()) and board.data[b - 1:b] == b")"
    for a, b in board.segments.span.tolist():
        assert parse_text(board.data[a:b])[0] == "segment"
    assert board.spans("zone").tolist() == [list(z.span) for z in board.zones if z.footprint is None]
    new_item = '  (segment (start 1 2) (end 3 4) (width 0.2) (layer "B.Cu") (net 1) (tstamp 1))\n'
    spliced = board.splice(board.insert_offset, board.insert_offset, new_item)
    assert spliced[:board.insert_offset] == board.data[:board.insert_offset]
    assert spliced[board.insert_offset + len(new_item):] == board.data[board.insert_offset:]
    again = parse_board(spliced, "spliced")
    assert len(again.segments) == len(board.segments) + 1
    assert again.segments.span[-1].tolist() == [board.insert_offset + 2, board.insert_offset + len(new_item) - 1]


def test_unusual_field_order_goes_through_the_tree_with_the_same_result():
    text = SAMPLE.read_text()
    first = re.search(r"  \(segment \(start ([^)]*)\) \(end ([^)]*)\) \(width ([^)]*)\) "
                      r"\(layer ([^)]*)\) \(net (\d+)\)", text)
    moved = (f'  (segment locked (layer {first.group(4)}) (net {first.group(5)}) (width {first.group(3)}) '
             f"(end {first.group(2)}) (start {first.group(1)})")
    board_a = parse_board(text, "a")
    board_b = parse_board(text.replace(first.group(0), moved, 1), "b")
    assert our_view(board_a)["segments"] == our_view(board_b)["segments"]


# ---- errors: one BoardError naming file, line and column ----

def _where(text: str, needle: str) -> tuple[int, int]:
    """Line and column (1-based) of a substring, found without the code under test."""
    before = text[:text.index(needle)]
    return before.count("\n") + 1, len(before) - (before.rfind("\n") + 1) + 1


def _raises_at(data: bytes | str, line: int, column: int, what: str) -> BoardError:
    where = re.escape(f"bad.kicad_pcb: line {line}, column {column}: ")
    with pytest.raises(BoardError, match=where + ".*" + what) as info:
        parse_board(data, "bad.kicad_pcb")
    assert (info.value.line, info.value.column) == (line, column)
    assert isinstance(info.value, ValueError) and isinstance(info.value, EbgError)
    return info.value


def _innermost_open(text: str) -> tuple[int, int]:
    """Reference scanner (plain Python, strings honoured) for the innermost list still open at the end."""
    stack, in_string, escaped = [], False, False
    for i, c in enumerate(text):
        if in_string:
            if escaped:
                escaped = False
            elif c == "\\":
                escaped = True
            elif c == '"':
                in_string = False
        elif c == '"':
            in_string = True
        elif c == "(":
            stack.append(i)
        elif c == ")":
            stack.pop()
    before = text[:stack[-1]]
    return before.count("\n") + 1, len(before) - (before.rfind("\n") + 1) + 1


@pytest.mark.parametrize("cut", [0.31, 0.5, 0.77, 0.999])
def test_truncated_file(cut):
    text = SAMPLE.read_text()
    part = text[:int(len(text) * cut)]
    part = part[:part.rfind('"')] if part.count('"') % 2 else part
    _raises_at(part, *_innermost_open(part), r"\d+ list\(s\) still open at the end of the file")


def test_unbalanced_close():
    text = SAMPLE.read_text()
    line, column = _where(text, "(net 3) (tstamp")
    bad = text.replace("(net 3) (tstamp", "(net 3)) (tstamp", 1)
    # The stray ')' closes the segment early; the segment's own last ')' then closes the board, on the same line.
    last = len(bad.split("\n")[line - 1].rstrip())
    _raises_at(bad, line, last, "this '\\)' closes the top-level list but the file goes on")


def test_deep_nesting_is_an_error_not_a_recursion():
    deep = "(kicad_pcb (version 20211014)\n  " + "(x " * 100_000 + ")" * 100_001
    _raises_at(deep, 2, 3 + 3 * (MAX_DEPTH - 1), f"nested deeper than {MAX_DEPTH} levels")


@pytest.mark.parametrize("data", [b"", b"  \n\t\n"])
def test_empty_file(data):
    _raises_at(data, 1, 1, "empty file")


def test_binary_file():
    data = SAMPLE.read_bytes()
    bad = data[:500] + b"\x00\x01\x02" + data[500:]
    head = data[:500].decode()
    _raises_at(bad, head.count("\n") + 1, len(head.split("\n")[-1]) + 1, "binary data")
    _raises_at(b"(kicad_pcb \xff\xfe)", 1, 12, "invalid UTF-8")


def test_bad_string_escape_and_unterminated_string():
    text = SAMPLE.read_text()
    line, column = _where(text, '"HX2_IRQ"')
    _raises_at(text.replace('"HX2_IRQ"', '"HX2_\\qIRQ"', 1), line, column + 5, "bad escape")
    _raises_at('(kicad_pcb (version 20211014)\n  (net 1 "open)\n)', 2, 10, "unterminated string")


def test_semantic_errors_name_the_item():
    text = SAMPLE.read_text()
    seg = re.search(r'\(segment \(start [^)]*\) \(end [^)]*\) \(width [^)]*\) \(layer "F.Cu"\)', text).group(0)
    line, column = _where(text, seg)
    _raises_at(text.replace(seg, seg.replace('"F.Cu"', '"F.SilkS"'), 1), line, column, "not a copper layer")
    _raises_at(text.replace(seg, seg.replace("(start ", "(start x", 1), 1), line, column, "not a number")
    net = re.search(r'\(segment [^\n]*\(net (\d+)\)', text)
    line, column = _where(text, net.group(0))
    _raises_at(text.replace(net.group(0), net.group(0).replace(f"(net {net.group(1)})", "(net 99)"), 1),
               line, column, "net 99 is not declared")
    _raises_at(text.replace("(version 20211014)", "(version 20171130)", 1), 1, 12, "older than KiCad 6.0")
    _raises_at('(footprint "x" (version 20211014))', 1, 1, r"expected a \(kicad_pcb ...\) board")


def test_unknown_items_are_ignored_with_a_warning():
    text = SAMPLE.read_text().rstrip()[:-1] + '  (hologram (at 1 2) (colour "gold"))\n)\n'
    board = parse_board(text, "x")
    assert any("hologram" in w for w in board.warnings)
    assert len(board.segments) == len(read_board(SAMPLE).segments)


def test_missing_file_is_a_board_error(tmp_path):
    with pytest.raises(BoardError, match="cannot be read"):
        read_board(tmp_path / "nope.kicad_pcb")


def test_scanner_handles_escaped_quotes_and_parentheses_in_strings():
    tree = parse_text(r'(a "x \"(\" y" (b "\\") "\x41\101")')
    assert tree == ["a", 'x "(" y', ["b", "\\"], "AA"]
    s = scan(b'(kicad_pcb (net 1 "a)(b") (segment))', "x")
    assert [h.decode() for h in s.heads] == ["net", "segment"]


def test_words_of_the_format_inside_strings_are_just_text():
    text = SAMPLE.read_text()
    text = text.replace('(name "GND_PLANE")', '(name "(filled_polygon (segment (start 0 0)")', 1)
    board = parse_board(text, "strings")
    assert [z.name for z in board.zones][0] == "(filled_polygon (segment (start 0 0)"
    assert len(board.segments) == len(read_board(SAMPLE).segments)
    assert board.zone_fill(board.zones[0]).area == pytest.approx(read_board(SAMPLE).zone_fill(board.zones[0]).area)


def _edge_board(edges: str) -> str:
    return ('(kicad_pcb (version 20221018) (generator pcbnew)\n  (layers (0 "F.Cu" signal) (31 "B.Cu" signal) '
            '(44 "Edge.Cuts" user))\n  (net 0 "")\n' + edges + ")\n")


def test_outline_from_polygon_with_a_round_cutout():
    board = parse_board(_edge_board(
        '  (gr_poly (pts (xy 0 0) (xy 40 0) (xy 40 30) (xy 0 30)) (layer "Edge.Cuts") '
        "(stroke (width 0.1) (type solid)) (fill none))\n"
        '  (gr_circle (center 20 15) (end 25 15) (layer "Edge.Cuts") (stroke (width 0.1) (type solid)) (fill none))\n'),
        "edges")
    assert len(board.outline.interiors) == 1
    # polygonised circle: sagitta under 0.25 um, so the area is within 2 pi r * 0.25 um of pi r^2
    assert board.outline.area == pytest.approx(40 * 30 - math.pi * 25, abs=2 * math.pi * 5 * 0.25e-3)
    assert board.warnings == ["board has no stack-up (setup > stackup): give stackup.er and stackup.h yourself"]


def test_open_outline_is_a_warning():
    board = parse_board(_edge_board(
        '  (gr_line (start 0 0) (end 10 0) (layer "Edge.Cuts") (width 0.1))\n'
        '  (gr_line (start 10 0) (end 10 10) (layer "Edge.Cuts") (width 0.1))\n'), "open")
    assert board.outline is None
    assert any("not closed" in w for w in board.warnings)


# ---- a large board: same counts as pcbnew (speed is measured by benchmarks/, never asserted here) ----

def _big_board(path: Path, segments: int) -> None:
    rng = random.Random(7)
    text = SAMPLE.read_text().rstrip()[:-1]
    rows = []
    for i in range(segments):
        x, y = rng.uniform(91, 150), rng.uniform(81, 128)
        rows.append(f'  (segment (start {x:.6f} {y:.6f}) (end {x + 0.5:.6f} {y:.6f}) (width 0.1) '
                    f'(layer "{("F.Cu", "B.Cu")[i % 2]}") (net {1 + i % 10}) '
                    f"(tstamp 00000000-0000-4000-8000-{i:012d}))")
    for i in range(segments // 20):
        rows.append(f'  (via (at {rng.uniform(91, 150):.4f} {rng.uniform(81, 128):.4f}) (size 0.6) (drill 0.3) '
                    f'(layers "F.Cu" "B.Cu") (net 1) (tstamp 10000000-0000-4000-8000-{i:012d}))')
    path.write_text(text + "\n".join(rows) + "\n)\n")


def test_large_board_reads_the_same_items_as_pcbnew(pcbnew, tmp_path):
    path = tmp_path / "big.kicad_pcb"
    _big_board(path, 100_000)
    board = read_board(path)
    theirs_board = pcbnew.LoadBoard(str(path))
    assert len(board.segments) == 100_000 + 23 and len(board.vias) == 5_000 + 5
    assert len(theirs_board.GetTracks()) == len(board.segments) + len(board.arcs) + len(board.vias)
    assert np.all(np.diff(board.segments.span[:, 0]) > 0)
