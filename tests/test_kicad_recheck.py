"""`check --board` measures the copper on the board, not the design stored in the footprint.

A filter is placed with `ebglayout place`, then its footprint is changed the way a
user would: with KiCad's own pcbnew (turned, flipped, moved, a rule area deleted, a
patch polygon edited, each saved by KiCad), and without KiCad by editing the board
text.  Each change must be reported at its place.  The references are KiCad's own
geometry of the changed items (zone outlines and shape bounding boxes, which pcbnew
computes in board coordinates) and, for text edits, the edit itself.
"""
from __future__ import annotations

import json
import re
import shutil

import pytest
from shapely.geometry import Point, Polygon, box
from shapely.ops import unary_union

from ebglayout.cli import main
from ebglayout.kicad.board import parse_board, read_board
from ebglayout.kicad.placed import board_cuts
from ebglayout.kicad.recheck import _cells_moved, check_board, placed_designs
from ebglayout.layout import build_layout
from ebglayout.spec import spec_from_dict

from conftest import SAMPLES

BOARD = SAMPLES / "hx2_hub.kicad_pcb"
PLAN = (f'[[filter]]\nspec = "{(SAMPLES / "hx2_l0_tx_straight.toml").as_posix()}"\npair = ["HX2_L0_TX_P", "HX2_L0_TX_N"]\n\n'
        f'[[filter]]\nspec = "{(SAMPLES / "hx2_l2_tx_bridged.toml").as_posix()}"\nmatch = "HX2_L1*"\n')
PLACE_TOL = 1e-6
"""mm: a reported place must lie inside the changed region (or on the footprint's position) up to this."""
AREA_TOL = 1e-4
"""mm2: measured area of a changed region against the area of the change itself."""
PLACED_RULES = ("placed-slot", "placed-copper", "placed-footprint")


@pytest.fixture(scope="module")
def placed(tmp_path_factory):
    """The sample board with a straight filter (FIL1) and a bridged one (FIL2), as `place --plan` writes it."""
    folder = tmp_path_factory.mktemp("recheck")
    shutil.copyfile(BOARD, folder / "hub.kicad_pcb")
    (folder / "plan.toml").write_text(PLAN)
    out = folder / "placed.kicad_pcb"
    assert main(["place", str(folder / "hub.kicad_pcb"), "--plan", str(folder / "plan.toml"), "--out", str(out)]) == 0
    return out


def _save_as(placed, path, data: bytes):
    path.write_bytes(data)
    shutil.copyfile(placed.with_suffix(".kicad_dru"), path.with_suffix(".kicad_dru"))
    return path


def _findings(path, reference="FIL1", rule=None):
    report = next(r for r in check_board(path, jobs=1) if r.name.startswith(reference + " "))
    return [f for f in report.findings if rule is None or f.rule == rule]


def _fil1(path):
    """FIL1's footprint, its design's layout and the cut the board holds of it."""
    board = read_board(path)
    footprint, design = next((fp, d) for fp, d in placed_designs(board) if fp.reference == "FIL1")
    layout = build_layout(spec_from_dict(design))
    return footprint, layout, board_cuts(board, footprint, layout)


def test_untouched_board_is_clean(placed):
    for report in check_board(placed, jobs=1):
        assert not report.errors and not report.warnings, report.format_table()
        results = {r.rule: r for r in report.results}
        assert all(results[rule].checked >= 1 and not results[rule].findings for rule in PLACED_RULES)


@pytest.mark.parametrize("board, spec, pair", [
    (SAMPLES / "hx2_hub.kicad_pcb", "hx2_l2_tx_bridged.toml", ("HX2_L1_RX_P", "HX2_L1_RX_N")),
    (SAMPLES.parent / "tests" / "boards" / "hx2_stripline6.kicad_pcb", "hx2_l3_rx_stripline.toml",
     ("HX2_L3_RX_DP", "HX2_L3_RX_DN")),
    (SAMPLES.parent / "tests" / "boards" / "hx2_v9.kicad_pcb", "hx2_l0_tx_straight.toml", ("HX2_L1_RX_P", "HX2_L1_RX_N")),
])
def test_board_cut_reads_back_as_designed(board, spec, pair, tmp_path):
    """Bridged (patch and bridges in one copper zone), stripline (two layers) and a KiCad 9 board: the cut read
    from the footprint's items is the design, role by role, to the nanometre grid."""
    out = tmp_path / "placed.kicad_pcb"
    # the stripline sample's [stackup] is not the 6-layer board's; the cut's geometry does not depend on it
    assert main(["place", str(board), "--pair", *pair, "--spec", str(SAMPLES / spec), "--out", str(out),
                 "--stackup-from-spec"]) == 0
    _, layout, cut = _fil1(out)
    assert len(cut.cuts) == len(layout.cuts) and not cut.elsewhere
    for designed, read in zip(layout.cuts, cut.cuts):
        for role in ("slot", "patch", "bridge", "outline"):
            assert designed.role(role).symmetric_difference(read.role(role)).area < 1e-9, (designed.layer, role)
    assert not any(f.rule.startswith("placed-") for f in _findings(out))


def test_check_board_json_is_json_alone(placed, tmp_path, capsys):
    """--json prints one JSON document and nothing else, also on a board without filters (the note goes to stderr)."""
    assert main(["check", "--board", str(placed), "--json", "--jobs", "1"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert [r["filter"].split()[0] for r in data] == ["FIL1", "FIL2"]
    plain = tmp_path / "plain.kicad_pcb"
    shutil.copyfile(BOARD, plain)
    assert main(["check", "--board", str(plain), "--json"]) == 0
    printed = capsys.readouterr()
    assert json.loads(printed.out) == [] and "no ebglayout filters" in printed.err


# ---- edits in the board text (no KiCad needed) ----

def _span(data: bytes, reference: str) -> tuple[int, int]:
    fp = next(fp for fp, _ in placed_designs(parse_board(data)) if fp.reference == reference)
    return fp.span


def _blocks(text: bytes, head: bytes) -> list[tuple[int, int]]:
    """Spans of the (head ...) blocks in text, by parenthesis count (written by ebglayout, so no parentheses in strings)."""
    out = []
    for match in re.finditer(rb"\(" + head + rb"\s", text):
        depth, k = 0, match.start()
        while True:
            depth += {ord("("): 1, ord(")"): -1}.get(text[k], 0)
            k += 1
            if depth == 0:
                break
        out.append((match.start(), k))
    return out


def _points(block: bytes) -> list[tuple[float, float]]:
    return [(float(x), float(y)) for x, y in re.findall(rb"\(xy ([-0-9.]+) ([-0-9.]+)\)", block)]


def _edit_fil1(placed, tmp_path, name, change):
    """The placed board with FIL1's footprint text replaced by change(footprint text)."""
    data = placed.read_bytes()
    a, b = _span(data, "FIL1")
    return _save_as(placed, tmp_path / f"{name}.kicad_pcb", data[:a] + change(data[a:b]) + data[b:])


def _at(footprint: bytes) -> tuple[float, float]:
    x, y = re.search(rb"\n    \(tedit 0\) \(tstamp [^)]*\) \(at ([-0-9.]+) ([-0-9.]+)\)", footprint).groups()
    return float(x), float(y)


def test_text_edit_rule_area_removed(placed, tmp_path):
    text = placed.read_bytes()
    a, b = _span(text, "FIL1")
    footprint = text[a:b]
    zones = _blocks(footprint, b"zone")
    za, zb = zones[1]
    ox, oy = _at(footprint)
    patches = unary_union([Polygon([(ox + x, oy + y) for x, y in _points(footprint[pa:pb])])
                           for pa, pb in _blocks(footprint, b"fp_poly")])
    lost = Polygon(_points(footprint[za:zb])).difference(patches)
    edited = _edit_fil1(placed, tmp_path, "no_area", lambda t: t[:za] + t[zb:])
    (finding,) = _findings(edited, rule="placed-slot")
    assert finding.layer == "In1.Cu" and "outside the filter's rule areas" in finding.message
    assert lost.distance(Point(finding.at)) <= PLACE_TOL
    assert finding.value == pytest.approx(lost.area, abs=AREA_TOL)
    assert not _findings(edited, rule="placed-copper") and not _findings(edited, rule="placed-footprint")


def test_text_edit_patch_changed(placed, tmp_path):
    text = placed.read_bytes()
    a, b = _span(text, "FIL1")
    footprint = text[a:b]
    pa, pb = _blocks(footprint, b"fp_poly")[1]
    local = _points(footprint[pa:pb])
    right = max(x for x, _ in local)
    shrunk = footprint[pa:pb].replace(f"(xy {right:g} ".encode(), f"(xy {right - 1:g} ".encode())
    edited = _edit_fil1(placed, tmp_path, "patch", lambda t: t[:pa] + shrunk + t[pb:])
    ox, oy = _at(footprint)
    ys = [y for _, y in local]
    removed = box(ox + right - 1, oy + min(ys), ox + right, oy + max(ys))
    (missing,) = _findings(edited, rule="placed-copper")
    assert "missing" in missing.message and removed.distance(Point(missing.at)) <= PLACE_TOL
    assert missing.value == pytest.approx(removed.area, abs=AREA_TOL)
    (widened,) = _findings(edited, rule="placed-slot")  # the rule area still keeps the pour off the cut-off strip
    assert "outside the designed slot" in widened.message and removed.distance(Point(widened.at)) <= PLACE_TOL


def test_unreadable_patch_polygon_is_left_out_with_a_warning(placed, tmp_path):
    """An fp_poly cut down to two points reads as no patch (with a reader warning), not as a failed check."""
    text = placed.read_bytes()
    a, b = _span(text, "FIL1")
    footprint = text[a:b]
    pa, pb = _blocks(footprint, b"fp_poly")[0]
    points = re.findall(rb"\(xy [-0-9.]+ [-0-9.]+\)", footprint[pa:pb])
    cut = footprint[pa:pb].replace(b" ".join(points), b" ".join(points[:2]))
    edited = _edit_fil1(placed, tmp_path, "two_points", lambda t: t[:pa] + cut + t[pb:])
    board = read_board(edited)
    assert len(next(fp for fp, _ in placed_designs(board) if fp.reference == "FIL1").polygons) == 2
    assert any("without 3 readable points" in w for w in board.warnings)
    ox, oy = _at(footprint)
    patch = Polygon([(ox + x, oy + y) for x, y in _points(footprint[pa:pb])])
    (missing,) = _findings(edited, rule="placed-copper")
    assert patch.distance(Point(missing.at)) <= PLACE_TOL and missing.value == pytest.approx(patch.area, abs=AREA_TOL)


def test_text_edit_footprint_moved(placed, tmp_path):
    dy = 3.0

    def move(footprint: bytes) -> bytes:
        return re.sub(rb"(\(tstamp [^)]*\) \(at [-0-9.]+ )([-0-9.]+)\)",
                      lambda m: m.group(1) + f"{float(m.group(2)) + dy:g})".encode(), footprint, count=1)

    text = placed.read_bytes()
    a, b = _span(text, "FIL1")
    footprint = text[a:b]
    x, y = _at(footprint)
    zones = _blocks(footprint, b"zone")
    parts, pos = [], 0
    for za, zb in zones:  # zones inside a footprint are in board coordinates: they move with it
        parts += [footprint[pos:za], re.sub(rb"\(xy ([-0-9.]+) ([-0-9.]+)\)",
                                            lambda m: f"(xy {m.group(1).decode()} {float(m.group(2)) + dy:g})".encode(),
                                            footprint[za:zb])]
        pos = zb
    moved = move(b"".join(parts) + footprint[pos:])
    edited = _edit_fil1(placed, tmp_path, "moved", lambda t: moved)
    moved, away = _findings(edited, rule="placed-footprint")
    assert f"moved {dy:g} mm" in moved.message and Point(moved.at).distance(Point(x, y + dy)) <= PLACE_TOL
    assert away.layer == "In1.Cu" and "no longer under the pair" in away.message
    assert any(f.rule == "crossing-count" and f.severity == "error" for f in _findings(edited))
    assert not _findings(edited, reference="FIL2")  # the other filter is untouched


def test_text_edit_bridged_patch_zone_removed(placed, tmp_path):
    text = placed.read_bytes()
    a, b = _span(text, "FIL2")
    footprint = text[a:b]
    copper = [(za, zb) for za, zb in _blocks(footprint, b"zone") if b"(keepout" not in footprint[za:zb]]
    za, zb = copper[0]
    patch = Polygon(_points(footprint[za:zb]))
    edited = _save_as(placed, tmp_path / "no_patch.kicad_pcb", text[:a] + footprint[:za] + footprint[zb:] + text[b:])
    (missing,) = _findings(edited, reference="FIL2", rule="placed-copper")
    assert "missing" in missing.message and patch.distance(Point(missing.at)) <= PLACE_TOL
    assert missing.value == pytest.approx(patch.area, abs=AREA_TOL)
    assert not _findings(edited, reference="FIL1")


def test_text_edit_rule_area_on_another_layer(placed, tmp_path):
    text = placed.read_bytes()
    a, b = _span(text, "FIL1")
    za, zb = _blocks(text[a:b], b"zone")[0]
    zone = text[a:b][za:zb]
    edited = _edit_fil1(placed, tmp_path, "layer",
                        lambda t: t[:za] + zone.replace(b'(layer "In1.Cu")', b'(layer "In2.Cu")') + t[zb:])
    (elsewhere,) = _findings(edited, rule="placed-footprint")
    assert elsewhere.layer == "In2.Cu" and "cuts In2.Cu" in elsewhere.message
    assert Polygon(_points(zone)).distance(Point(elsewhere.at)) <= PLACE_TOL
    assert [f.layer for f in _findings(edited, rule="placed-slot")] == ["In1.Cu"]


# ---- edits made and saved by KiCad ----

def _kicad_geometry(pcbnew, board, footprint, layer_name: str):
    """The footprint's rule areas and copper polygons on one layer, in board coordinates, as pcbnew computes them.

    Rule areas: their outlines.  Polygons: their bounding boxes, exact for the rectangular patches used here.
    """
    from kicad_rig import is_polygon_graphic, poly_set_to_shapely

    layer = board.GetLayerID(layer_name)
    areas = [poly_set_to_shapely(pcbnew, z.Outline()) for z in footprint.Zones() if z.IsOnLayer(layer)]
    patches = []
    for item in footprint.GraphicalItems():
        if is_polygon_graphic(pcbnew, item) and item.GetLayer() == layer:
            patches.append(_box_mm(item.GetBoundingBox()))
    return unary_union(areas + patches), unary_union(patches)


def _box_mm(bb):
    """A pcbnew bounding box (nm) as a shapely box in mm."""
    return box(bb.GetX() / 1e6, bb.GetY() / 1e6, (bb.GetX() + bb.GetWidth()) / 1e6, (bb.GetY() + bb.GetHeight()) / 1e6)


def _position(footprint) -> tuple[float, float]:
    pos = footprint.GetPosition()
    return pos.x / 1e6, pos.y / 1e6


def _with_kicad(pcbnew, placed, tmp_path, name, change):
    """Load the placed board in pcbnew, change FIL1, save it with KiCad; the new path, the footprint and the change.

    pcbnew frees a footprint with its board, so the board is returned too and kept by the caller.
    """
    board = pcbnew.LoadBoard(str(placed))
    footprint = next(fp for fp in board.GetFootprints() if fp.GetReference() == "FIL1")
    facts = change(pcbnew, footprint)
    path = tmp_path / f"{name}.kicad_pcb"
    pcbnew.SaveBoard(str(path), board)
    shutil.copyfile(placed.with_suffix(".kicad_dru"), path.with_suffix(".kicad_dru"))
    return path, board, footprint, facts


def _same(geom_a, geom_b, tol=1e-6) -> bool:
    return geom_a.symmetric_difference(geom_b).area <= tol


def test_kicad_saved_untouched_board_is_clean(pcbnew, placed, tmp_path):
    path, board, footprint, _ = _with_kicad(pcbnew, placed, tmp_path, "same", lambda k, fp: None)
    for report in check_board(path, jobs=1):
        assert not report.errors, report.format_table()
    _, layout, cut = _fil1(path)
    outline, patches = _kicad_geometry(pcbnew, board, footprint, "In1.Cu")
    assert _same(cut.cuts[0].outline, outline) and _same(cut.cuts[0].patch, patches)


def _moved_cells(footprint, layout):
    """The union of the design's patches as `check --board` moves its cells to where the footprint sits."""
    return unary_union([cell.patch for cell in _cells_moved(layout, footprint).cells])


def _turn(pcbnew, footprint):
    footprint.SetOrientationDegrees(90)


def _flip(pcbnew, footprint):
    footprint.Flip(footprint.GetPosition(), getattr(pcbnew, "FLIP_DIRECTION_TOP_BOTTOM", False))


def test_kicad_turned_footprint(pcbnew, placed, tmp_path):
    path, board, footprint, _ = _with_kicad(pcbnew, placed, tmp_path, "turned", _turn)
    read, layout, cut = _fil1(path)
    outline, patches = _kicad_geometry(pcbnew, board, footprint, "In1.Cu")
    assert _same(cut.cuts[0].outline, outline) and _same(cut.cuts[0].patch, patches)  # read as KiCad placed it
    assert _same(_moved_cells(read, layout), patches)  # the design's cells, which the cell rules read, follow it
    (turned,) = [f for f in _findings(path, rule="placed-footprint") if "turned" in f.message]
    assert "90 deg" in turned.message and Point(turned.at).distance(Point(_position(footprint))) <= PLACE_TOL
    # the turned cut is measured: its slots lie across the pair now, so each trace crosses fewer of them
    assert any(f.rule == "crossing-count" for f in _findings(path))
    added = [f for f in _findings(path, rule="placed-slot") if "outside the designed slot" in f.message]
    assert added and all(outline.buffer(PLACE_TOL).contains(Point(f.at)) for f in added)


def test_kicad_flipped_footprint(pcbnew, placed, tmp_path):
    path, board, footprint, _ = _with_kicad(pcbnew, placed, tmp_path, "flipped", _flip)
    assert footprint.GetLayerName() == "B.Cu"
    read, layout, cut = _fil1(path)
    # Where the inner-layer items go is KiCad's choice, measured here: KiCad 6.0.11 moves them from In1.Cu to
    # In2.Cu (4 layers), KiCad 9.0.2 leaves them on In1.Cu, mirrored.  The check must read them wherever they are.
    (layer,) = [name for name in ("In1.Cu", "In2.Cu")
                if not _kicad_geometry(pcbnew, board, footprint, name)[0].is_empty]
    outline, patches = _kicad_geometry(pcbnew, board, footprint, layer)
    assert _same(_moved_cells(read, layout), patches)
    found = _findings(path, rule="placed-footprint")
    assert any("flipped to B.Cu" in f.message and f.severity == "error"
               and Point(f.at).distance(Point(_position(footprint))) <= PLACE_TOL for f in found)
    if layer == "In1.Cu":
        assert _same(cut.cuts[0].outline, outline) and _same(cut.cuts[0].patch, patches) and not cut.elsewhere
        return
    assert _same(cut.elsewhere["In2.Cu"], outline)
    assert cut.cuts[0].outline.is_empty
    (other,) = [f for f in found if f.layer == "In2.Cu"]
    assert outline.distance(Point(other.at)) <= PLACE_TOL
    assert any("no cut left on In1.Cu" in f.message for f in found)
    assert any(f.rule == "crossing-count" and f.severity == "error" for f in _findings(path))


def test_kicad_moved_footprint(pcbnew, placed, tmp_path):
    def move(k, fp):
        pos = fp.GetPosition()
        pos.y += k.FromMM(3.0)  # a copy in KiCad's own point type (wxPoint in 6, VECTOR2I from 7)
        fp.SetPosition(pos)

    before = _fil1(placed)[2].cuts[0].slot
    path, board, footprint, _ = _with_kicad(pcbnew, placed, tmp_path, "moved", move)
    _, layout, cut = _fil1(path)
    outline, _ = _kicad_geometry(pcbnew, board, footprint, "In1.Cu")
    assert _same(cut.cuts[0].outline, outline)
    (moved,) = [f for f in _findings(path, rule="placed-footprint") if "moved" in f.message]
    assert "moved 3 mm" in moved.message and Point(moved.at).distance(Point(_position(footprint))) <= PLACE_TOL
    lost = [f for f in _findings(path, rule="placed-slot") if "outside the filter's rule areas" in f.message]
    assert lost and all(before.distance(Point(f.at)) <= PLACE_TOL for f in lost)
    assert sum(f.value for f in lost) == pytest.approx(before.area, abs=AREA_TOL)
    assert any(f.rule == "crossing-count" and f.severity == "error" for f in _findings(path))


_REMOVED: list = []


def test_kicad_rule_area_deleted(pcbnew, placed, tmp_path):
    def delete(k, fp):
        zone = list(fp.Zones())[1]
        outline = _box_mm(zone.GetBoundingBox())  # the rule areas of a straight filter are rectangles
        fp.Remove(zone)
        return outline, zone

    path, board, footprint, (deleted, removed) = _with_kicad(pcbnew, placed, tmp_path, "deleted", delete)
    # Kept for the whole run: pcbnew 6.0.11 hands a removed zone to Python, which has no destructor for FP_ZONE,
    # and dropping it left SWIG returning untyped objects for the rest of the process.
    _REMOVED.append(removed)
    _, patches = _kicad_geometry(pcbnew, board, footprint, "In1.Cu")
    lost = deleted.difference(patches)
    (finding,) = _findings(path, rule="placed-slot")
    assert finding.layer == "In1.Cu" and lost.distance(Point(finding.at)) <= PLACE_TOL
    assert finding.value == pytest.approx(lost.area, abs=AREA_TOL)
    assert not _findings(path, rule="placed-footprint")
    # KiCad's own fill confirms it: around the patch that lost its rule area the pour no longer leaves the
    # designed slot. The clearance rule no longer applies there, so a clearance sets the gap: not filled, wider.
    from kicad_rig import fill_board

    filled, _ = fill_board(pcbnew, str(path))
    near = deleted.buffer(0.6, join_style="mitre")
    void = near.difference(filled["In1.Cu"].plane).difference(filled["In1.Cu"].graphics)
    _, layout, _ = _fil1(path)
    designed = layout.cuts[0].slot.intersection(near)
    assert void.intersection(lost).area >= 0.9 * lost.area and void.area >= designed.area + 0.5 * lost.area


def test_kicad_patch_edited(pcbnew, placed, tmp_path):
    """Two corners of the middle patch pulled in by 1 mm with pcbnew's polygon API (KiCad 6 keeps it in footprint
    coordinates and needs SetDrawCoord; 7+ keeps board coordinates)."""
    from kicad_rig import is_polygon_graphic

    def edit(k, fp):
        item = [g for g in fp.GraphicalItems() if is_polygon_graphic(k, g)][1]
        before = _box_mm(item.GetBoundingBox())
        ring = item.GetPolyShape().Outline(0)
        right = max(ring.CPoint(i).x for i in range(ring.PointCount()))
        for i in range(ring.PointCount()):
            if ring.CPoint(i).x == right:
                ring.SetPoint(i, k.VECTOR2I(right - k.FromMM(1), ring.CPoint(i).y))
        if hasattr(item, "SetDrawCoord"):
            item.SetDrawCoord()
        return before.difference(_box_mm(item.GetBoundingBox()))

    path, board, footprint, removed = _with_kicad(pcbnew, placed, tmp_path, "patch", edit)
    assert removed.area == pytest.approx(2.4, abs=AREA_TOL)  # 1 mm off a 2.4 mm wide patch
    (missing,) = _findings(path, rule="placed-copper")
    assert "missing" in missing.message and removed.distance(Point(missing.at)) <= PLACE_TOL
    assert missing.value == pytest.approx(removed.area, abs=AREA_TOL)
