"""Footprint text in the KiCad 6-9 dialects, rule merging and board insertion.

KiCad 6's own footprint loader (``pcbnew.FootprintLoad``) is the outside check
for the 6 dialect.  On a host with KiCad 6.0.11 the 7/8/9 dialects are checked at text level (tokens from KiCad's
file-format changes) and must be refused by 6.0.11; the KiCad 9 root (tools/kicad9-root.sh) runs the same tests
with 9.0.2, which loads all four dialects.
"""
from __future__ import annotations

import re

import pytest
import shapely.affinity
from shapely.geometry import Polygon
from shapely.ops import unary_union

from ebglayout.errors import BoardError
from ebglayout.kicad.footprint import (BRIDGE_ZONE_MIN_WIDTH, KICAD6, KICAD7, KICAD8, KICAD9, board_footprint_text,
                                       footprint_origin, footprint_text, hole_free)
from ebglayout.kicad.insert import board_version, insert_footprints, plane_net
from ebglayout.kicad.rules import RULE_NAME, has_rule, merge_rules, rules_text
from kicad_rig import Rig, board_text, is_polygon_graphic, poly_set_to_shapely

DIALECTS = (KICAD6, KICAD7, KICAD8, KICAD9)
FLAGS = ("(tracks allowed)", "(vias allowed)", "(pads allowed)", "(copperpour not_allowed)", "(footprints allowed)")
PTS = re.compile(r"\(pts ((?:\(xy [-\d.]+ [-\d.]+\)\s*)+)\)")


def balanced(text: str) -> bool:
    depth = 0
    for tok in re.findall(r'"(?:[^"\\]|\\.)*"|[()]', text):
        depth += {"(": 1, ")": -1}.get(tok, 0)
        if depth < 0:
            return False
    return depth == 0


def blocks(text: str, head: str) -> list[str]:
    """Every '(head ...' list in a text, found by paren matching."""
    out = []
    for m in re.finditer(r"\(" + re.escape(head) + r"[\s)]", text):
        depth, i = 0, m.start()
        for tok in re.finditer(r'"(?:[^"\\]|\\.)*"|[()]', text[i:]):
            depth += {"(": 1, ")": -1}.get(tok.group(), 0)
            if depth == 0:
                out.append(text[i:i + tok.end()])
                break
    return out


def polygon(block: str, dx: float = 0.0, dy: float = 0.0) -> Polygon:
    pts = re.findall(r"\(xy ([-\d.]+) ([-\d.]+)\)", PTS.search(block).group(1))
    return Polygon([(float(x) + dx, float(y) + dy) for x, y in pts])


@pytest.mark.parametrize("version", DIALECTS)
def test_dialect_tokens(sample_layouts, version):
    """Each dialect carries its own tokens and none of the other dialects'."""
    for layout in sample_layouts.values():
        text = footprint_text(layout, version)
        board = board_footprint_text(layout, version, plane_net=(1, "GND"))
        for t in (text, board):
            assert balanced(t)
            assert "(attr board_only exclude_from_pos_files exclude_from_bom)" in t
            assert ("(stroke (width 0) (type solid))" in t) == (version >= KICAD7 and layout.spec.style != "bridged")
            assert ("(tstamp " in t) == (version < KICAD8)
            assert ('(uuid "' in t) == (version >= KICAD8)
            assert ('(property "Reference"' in t) == (version >= KICAD8)
            assert ("(fp_text reference" in t) == (version < KICAD8)
            assert ("(locked yes)" in t) == (version >= KICAD8)
            assert (re.search(r'" locked \(layer|\n\s+locked \(layer', t) is not None) == (version < KICAD8)
            assert ("(placement (enabled no)" in t) == (version >= KICAD9)
            assert ("(fill yes)" in t or "(fill no)" in t) == (version >= KICAD9)
            assert ("(fill solid)" in t or "(fill none)" in t) == (version < KICAD9)
            assert ("(width 0) (fill solid)" in t) == (version == KICAD6 and layout.spec.style != "bridged")
        assert text.startswith(f'(footprint "{layout.spec.name}" (version {version})')
        assert ('(generator_version "' in text) == (version >= KICAD8)
        assert "(version " not in board and board.startswith(f'  (footprint "ebglayout:{layout.spec.name}"')


def test_library_text_is_deterministic_and_distinct_per_placement(sample_layouts):
    layout = sample_layouts["hx2_l0_tx_straight"]
    assert footprint_text(layout) == footprint_text(layout)
    one = board_footprint_text(layout, reference="FIL1")
    two = board_footprint_text(layout, reference="FIL2")
    ids = lambda t: set(re.findall(r"\(tstamp ([0-9a-f-]+)\)", t))
    assert one == board_footprint_text(layout, reference="FIL1")
    assert ids(one) and not ids(one) & ids(two), "two placements must not share item UUIDs"


def test_geometry_in_text_matches_the_layout(sample_layouts):
    """Rule areas are hole-free with all five flags and cover the cut's outer edge; patches are the layout's."""
    for layout in sample_layouts.values():
        ox, oy = footprint_origin(layout)
        for version in DIALECTS:
            for board, text in ((False, footprint_text(layout, version)),
                                (True, board_footprint_text(layout, version, plane_net=(1, "GND")))):
                zones = blocks(text, "zone")
                areas = [z for z in zones if "(keepout" in z]
                assert areas and all(all(f in z for f in FLAGS) for z in areas)
                assert all(z.count("(polygon") == 1 for z in zones), "rule areas must be hole-free pieces"
                shift = (0.0, 0.0) if board else (ox, oy)
                for cut in layout.cuts:
                    mine = [z for z in areas if f'"{cut.layer}"' in z]
                    covered = unary_union([polygon(z, *shift) for z in mine])
                    copper = [z for z in zones if "(keepout" not in z and f'"{cut.layer}"' in z]
                    patches = unary_union([polygon(b, ox, oy) for b in blocks(text, "fp_poly") if f'"{cut.layer}"' in b]
                                          + [polygon(z, *shift) for z in copper])
                    if layout.spec.style == "bridged":
                        assert covered.symmetric_difference(cut.slot).area < 1e-9
                        assert patches.symmetric_difference(unary_union([cut.patch, cut.bridge])).area < 1e-9
                        assert all(f"(min_thickness {BRIDGE_ZONE_MIN_WIDTH:g})" in z for z in copper)
                        assert all("(net 1) (net_name \"GND\")" in z for z in copper) == board
                    else:
                        assert covered.symmetric_difference(cut.outline).area < 1e-9
                        assert patches.symmetric_difference(cut.patch).area < 1e-9


def test_hole_free_pieces_rebuild_a_polygon_with_holes():
    holes = [[(1, 1), (3, 1), (3, 5), (1, 5)], [(5, 2), (8, 2), (8, 4), (5, 4)]]
    ring = Polygon([(0, 0), (10, 0), (10, 6), (0, 6)], holes)
    pieces = hole_free(ring)
    assert len(pieces) >= 3 and all(not p.interiors for p in pieces)
    assert unary_union(pieces).symmetric_difference(ring).area < 1e-9
    assert sum(p.area for p in pieces) == pytest.approx(ring.area, abs=1e-9)


def test_kicad6_loads_the_library_footprint(pcbnew, sample_layouts, tmp_path):
    """KiCad 6's footprint loader reads every sample's .kicad_mod with the items we wrote."""
    lib = tmp_path / "ebg.pretty"
    lib.mkdir()
    for name, layout in sample_layouts.items():
        text = footprint_text(layout)
        (lib / f"{name}.kicad_mod").write_text(text)
        fp = pcbnew.FootprintLoad(str(lib), name)
        assert fp is not None, f"KiCad 6 could not read {name}.kicad_mod"
        assert fp.GetReference() == "FIL**" and fp.GetValue() == name
        assert fp.GetAttributes() == (pcbnew.FP_BOARD_ONLY | pcbnew.FP_EXCLUDE_FROM_BOM
                                      | pcbnew.FP_EXCLUDE_FROM_POS_FILES)
        zones = list(fp.Zones())
        assert len(zones) == len(blocks(text, "zone"))
        areas = [z for z in zones if z.GetIsRuleArea()]
        assert areas and all(z.GetDoNotAllowCopperPour() and not z.GetDoNotAllowTracks() and not z.GetDoNotAllowVias()
                             and not z.GetDoNotAllowPads() and not z.GetDoNotAllowFootprints() for z in areas)
        assert {z.GetZoneName() for z in areas} == {f"EBGCUT_{name}"}
        ox, oy = footprint_origin(layout)
        read = unary_union([poly_set_to_shapely(pcbnew, z.Outline()) for z in areas])
        cut = layout.cuts[0]
        want = cut.slot if layout.spec.style == "bridged" else cut.outline
        assert read.symmetric_difference(shapely.affinity.translate(want, -ox, -oy)).area < 1e-9
        polys = [g for g in fp.GraphicalItems() if is_polygon_graphic(pcbnew, g)]
        assert len(polys) == (0 if layout.spec.style == "bridged" else sum(len(c.patch.geoms) for c in layout.cuts))
        assert all(p.GetWidth() == 0 and p.IsFilled() for p in polys)
        courtyard = [g for g in fp.GraphicalItems() if g.GetClass() in ("MGRAPHIC", "PCB_SHAPE", "FP_SHAPE") and g.GetLayer() == pcbnew.F_CrtYd]
        assert len(courtyard) == 1


def _loaded_facts(pcbnew, footprint) -> dict:
    """What KiCad's footprint loader made of a .kicad_mod, in comparable form (areas rounded to 1 um2)."""
    zones = sorted((z.GetIsRuleArea(), z.GetZoneName(), round(poly_set_to_shapely(pcbnew, z.Outline()).area, 6))
                   for z in footprint.Zones())
    polys = [g for g in footprint.GraphicalItems() if is_polygon_graphic(pcbnew, g)]
    return {"reference": footprint.GetReference(), "value": footprint.GetValue(),
            "attributes": footprint.GetAttributes(), "locked": footprint.IsLocked(), "zones": zones,
            "polygons": sorted((g.GetLayerName(), g.GetWidth(), g.IsFilled(),
                                round(poly_set_to_shapely(pcbnew, g.GetPolyShape()).area, 6)) for g in polys),
            "courtyards": sum(1 for g in footprint.GraphicalItems() if g.GetLayer() == pcbnew.F_CrtYd)}


@pytest.mark.parametrize("name", ["hx2_l1_rx_folded", "hx2_l2_tx_bridged"])
def test_each_dialect_loads_as_the_kicad6_text_where_kicad_reads_it(pcbnew, sample_layouts, tmp_path, name):
    """A KiCad whose own file format (SEXPR_BOARD_FILE_VERSION) is as new as a dialect loads that dialect's
    text with the same items as the KiCad 6 text; an older KiCad refuses it (6.0.11 fails on the first unknown
    token), so the 7/8/9 texts really use the newer syntax.  Run with 6.0.11 (refuses 7, 8, 9) and 9.0.2
    (loads all four)."""
    own = int(pcbnew.SEXPR_BOARD_FILE_VERSION)
    lib = tmp_path / "dialects.pretty"
    lib.mkdir()
    layout = sample_layouts[name]
    for version in DIALECTS:
        (lib / f"v{version}.kicad_mod").write_text(footprint_text(layout, version))
    want = _loaded_facts(pcbnew, pcbnew.FootprintLoad(str(lib), f"v{KICAD6}"))
    assert want["zones"] and want["courtyards"] == 1
    for version in DIALECTS[1:]:
        loaded = pcbnew.FootprintLoad(str(lib), f"v{version}")
        if version <= own:
            assert loaded is not None, f"KiCad {own} could not read the {version} text"
            assert _loaded_facts(pcbnew, loaded) == want, version
        else:
            assert loaded is None, f"KiCad {own} read the {version} text as its own"


def test_merge_rules_keeps_user_rules_and_puts_ours_last(sample_layouts):
    ours = rules_text(*sample_layouts.values())
    user = ('(version 1)\n# clearance for the mains section\n(rule "hv"\n  (constraint clearance (min 1.5mm))\n'
            '  (condition "A.NetClass == \'HV\' && B.Type == \'Pad\' # not a comment inside a string")\n)\n')
    merged = merge_rules(user, ours)
    assert merged.startswith(user.rstrip()) and merged.endswith(ours.split("\n", 1)[1])
    assert merged.count("(version 1)") == 1 and merge_rules(merged, ours) == merged
    assert merge_rules(None, ours) == ours == merge_rules("  \n", ours)
    body = ours.split("\n", 1)[1]
    moved = merge_rules('(rule "x" (constraint clearance (min 1mm)))\n(version 1)\n' + body + "(rule y)\n", ours)
    assert moved.startswith("(version 1)\n(rule \"x\"") and moved.count(RULE_NAME) == 1
    assert has_rule(moved) == (True, True) and has_rule(ours + "(rule z)\n") == (True, False)
    assert has_rule(ours.replace("(version 1)\n", "")) == (False, False)
    with pytest.raises(BoardError, match=r"line 2, column 1"):
        merge_rules("(version 1)\n(rule \"open\"", ours)


def test_rule_layer_clause_and_clearance_limit(sample_layouts):
    layout = sample_layouts["hx2_l0_tx_straight"]
    assert "(layer inner)" in rules_text(layout)
    with pytest.raises(ValueError, match="slot - 0.0005"):
        rules_text(layout, clearance=layout.spec.slot)


def test_insert_and_nets(sample_layouts):
    layout = sample_layouts["hx2_l2_tx_bridged"]
    base = board_text(Rig())
    assert plane_net(base, "GND") == (1, "GND")
    with pytest.raises(BoardError, match="net 'AGND' not found"):
        plane_net(base, "AGND")
    bare = board_footprint_text(layout)
    two = insert_footprints(base, [bare, board_footprint_text(layout, reference="FIL2", at=(50, 50))])
    assert two.startswith(base[:base.rstrip().rfind(")")]) and two.endswith(")\n") and balanced(two)
    one_line = "(kicad_pcb (version 20211014) (net 0 \"\"))"
    assert insert_footprints(one_line, ["  (footprint \"x\")\n"]) == one_line[:-1] + "\n  (footprint \"x\")\n)"
    with pytest.raises(BoardError, match=r"line 1, column 1: not a KiCad board"):
        insert_footprints("(kicad_sch)", [bare])
    with pytest.raises(BoardError, match=r"line 3, column 1: unbalanced"):
        insert_footprints("(kicad_pcb\n)\n)", [bare])
    with pytest.raises(BoardError, match="unclosed"):
        insert_footprints("(kicad_pcb (net 0 \"\")", [bare])


def test_inserted_board_keeps_every_other_byte(sample_layouts):
    """Insertion adds text only; the rest of the board is byte-identical."""
    layout = sample_layouts["hx2_l3_rx_stripline"]
    base = board_text(Rig(copper_layers=6, plane_layers=("In1.Cu", "In3.Cu")))
    item = board_footprint_text(layout, plane_net=plane_net(base, "GND"))
    out = insert_footprints(base, [item])
    k = base.rstrip().rfind(")")
    assert out[:k] == base[:k] and out[k + len(item):] == base[k:]
    assert out[k:k + len(item)] == item


def test_board_version_picks_the_dialect():
    base = board_text(Rig())
    assert board_version(base) == KICAD6
    for stamp, want in ((20221018, KICAD7), (20230620, KICAD7), (20240108, KICAD8), (20241229, KICAD9)):
        assert board_version(base.replace("(version 20211014)", f"(version {stamp})")) == want
    for stamp in (20171130, 20260206):
        with pytest.raises(BoardError, match=f"board format {stamp} is not supported"):
            board_version(base.replace("(version 20211014)", f"(version {stamp})"))
