"""KiCad's own zone filler reproduces the engine's slots (pcbnew of the installed KiCad, in-process).

Each test writes a KiCad 6 board (tests/kicad_rig.py), inserts the filter with
``insert_footprints``, writes the .kicad_dru beside it, loads it with
``pcbnew.LoadBoard``, fills board and footprint zones with ``ZONE_FILLER`` and
compares the filled copper with the engine's slot polygons.  Tolerances: 5 um on
widths and corner gaps, 1 % of the slot area on the symmetric difference.
"""
from __future__ import annotations

import math
import re
import tomllib

import pytest
from shapely.geometry import LineString, Point

from conftest import SAMPLES
from ebglayout.kicad.footprint import board_footprint_text
from ebglayout.kicad.insert import fill_risks, insert_footprints, plane_net, zone_priority_for
from ebglayout.kicad.rules import merge_rules, rules_text
from kicad_rig import Rig, board_text, drc_findings, fill_board, shifted_layout, slot_report

TOL = 0.001
"""Slot widths, corner gaps and bridge widths of KiCad's fill match the design within 1 um (measured with 6.0.11:
0 um, to float noise, where patches are copper polygons)."""
ZONE_FILL_TOL = 0.002
"""Slot widths where bridged patches are copper zones that KiCad fills itself: measured 1.5 um with 6.0.11."""


def board_only_bits(pcbnew):
    """Board-only, excluded from BOM and position files: KiCad's FOOTPRINT attribute bits."""
    return pcbnew.FP_BOARD_ONLY | pcbnew.FP_EXCLUDE_FROM_BOM | pcbnew.FP_EXCLUDE_FROM_POS_FILES

SAMPLE_NAMES = ("hx2_l0_tx_straight", "hx2_l1_rx_folded", "hx2_l2_tx_bridged", "hx2_l3_rx_stripline")
ROTATED = {
    "name": "hx2_l4_tx_skewed", "units": "mm",
    "pair": {"width": 0.12, "spacing": 0.15, "path": [[0, 0], [17.320508, 10.0]], "layer": "F.Cu",
             "nets": ["HX2_L4_TX_P", "HX2_L4_TX_N"]},
    "plane": {"layers": ["In2.Cu"], "net": "GND"},
    "cut": {"style": "straight", "patch": [3.0, 2.4], "count": 2, "slot": 0.15, "web": 0.3},
    "stackup": {"er": 4.1, "h": 0.1},
}
"""Invented spec whose cells sit at 30 degrees, so no slot edge is axis-aligned."""


def sample_layout(name: str):
    with open(SAMPLES / f"{name}.toml", "rb") as fh:
        raw = tomllib.load(fh)
    return shifted_layout(raw, 100.0, 100.0)


def rig_for(layout, **changes) -> Rig:
    layers = tuple(c.layer for c in layout.cuts)
    copper = 6 if any(int(n[2:-3]) > 2 for n in layers if n.startswith("In")) else 4
    return Rig(copper_layers=copper, plane_layers=layers, **changes)


def make_board(tmp_path, layout, rig: Rig, dru: str | None = "ours", priority: int | None = None):
    """Write board (+ rules) into tmp_path; return (board path, board text, rules text)."""
    base = board_text(rig)
    net = plane_net(base, "GND")
    prio = priority if priority is not None else zone_priority_for(base, layout, "GND")
    text = insert_footprints(base, [board_footprint_text(layout, plane_net=net, zone_priority=prio)])
    path = tmp_path / "rig.kicad_pcb"
    path.write_text(text)
    rules = rules_text(layout) if dru == "ours" else dru
    if rules is not None:
        (tmp_path / "rig.kicad_dru").write_text(rules)
    return path, text, rules


def assert_exact(layout, filled, layer):
    """Widths, corner gaps and area of KiCad's void match the engine's slot on one layer."""
    r = slot_report(layout, filled[layer], layer)
    slot = layout.spec.slot
    assert r["symdiff"] <= 0.01 * r["slot_area"], f"{layer}: symmetric difference {r['symdiff']:.5f} mm2"
    tol = ZONE_FILL_TOL if layout.spec.style == "bridged" else TOL
    worst = max(r["width_errors"])
    assert worst[0] <= tol, f"{layer}: width off by {worst[0]:.4f} mm at {worst[2]}"
    full = [w for w in r["width_errors"] if abs(w[1] - slot) < 1e-6]
    assert len(full) >= len(r["width_errors"]) // 2, "most probes should cross a full slot width"
    diagonal = [c for c in r["corner_errors"] if abs(c[1] - slot * math.sqrt(2)) < 1e-6]
    assert len(diagonal) >= 4 * len(layout.cells), "every patch has four outer corners"
    for _, _, got, where in diagonal:
        sharp = slot * math.sqrt(2)
        assert abs(got - sharp) <= tol, f"{layer}: 45-degree gap {got:.4f} at {where} (sharp: {sharp:.4f})"
    return r


CASES = SAMPLE_NAMES + ("skewed",)


@pytest.mark.parametrize("case", CASES)
def test_fill_reproduces_the_design(pcbnew, tmp_path, case):
    """Every sample style and a 30-degree layout: exact slots, islands and bridges as designed, DRC clean."""
    layout = shifted_layout(ROTATED, 100.0, 100.0) if case == "skewed" else sample_layout(case)
    path, text, rules = make_board(tmp_path, layout, rig_for(layout))
    assert fill_risks(text, layout, "GND", rules) == []
    filled, facts = fill_board(pcbnew, path)
    assert facts["found"] == 1 and facts["locked"]
    assert facts["attributes"] == board_only_bits(pcbnew)
    assert facts["rule_areas"] > 0
    for cut in layout.cuts:
        assert_exact(layout, filled, cut.layer)
        f = filled[cut.layer]
        local = f.copper.intersection(cut.outline.buffer(1.5))
        pieces = list(getattr(local, "geoms", [local]))
        if layout.spec.style == "bridged":
            assert facts["zone_nets"] == ["GND"]
            assert len(pieces) == 1, "patches must join the plane through their bridges"
            assert f.zones.intersects(f.plane.buffer(1e-4))
            _assert_bridge_widths(layout, cut, f)
        else:
            assert len(pieces) == 1 + len(cut.patch.geoms), "each patch is its own copper island"
            assert f.plane.intersection(cut.patch).area < 1e-9
            assert f.graphics.symmetric_difference(cut.patch).area < 1e-9
    assert drc_findings(pcbnew, path) == []


def _assert_bridge_widths(layout, cut, filled):
    """Cross each designed bridge at three stations: the filled copper there is the bridge width."""
    width = layout.spec.bridge_width
    for bridge in cut.bridge.geoms:
        rect = bridge.minimum_rotated_rectangle
        pts = list(rect.exterior.coords)[:4]
        sides = [(pts[i], pts[(i + 1) % 4]) for i in range(4)]
        short = min(sides, key=lambda s: math.dist(*s))
        long_side = max(sides, key=lambda s: math.dist(*s))
        ux, uy = (short[1][0] - short[0][0]) / width, (short[1][1] - short[0][1]) / width
        lx, ly = long_side[1][0] - long_side[0][0], long_side[1][1] - long_side[0][1]
        cx, cy = bridge.centroid.x, bridge.centroid.y
        for f in (-0.35, 0.0, 0.35):
            px, py = cx + f * lx, cy + f * ly
            reach = width / 2 + 0.8 * layout.spec.slot
            line = LineString([(px - ux * reach, py - uy * reach), (px + ux * reach, py + uy * reach)])
            copper = filled.copper.intersection(line).length
            assert abs(copper - width) <= TOL, f"bridge at {px:.3f},{py:.3f}: copper {copper:.4f} mm, designed {width}"


def test_large_zone_clearance_is_harmless_with_the_rule(pcbnew, tmp_path):
    """Plane zone clearance 1.0 mm (> slot and > web): the rule wins, the fill is still exact."""
    layout = sample_layout("hx2_l0_tx_straight")
    path, text, rules = make_board(tmp_path, layout, rig_for(layout, zone_clearance=1.0))
    assert fill_risks(text, layout, "GND", rules) == []
    filled, _ = fill_board(pcbnew, path)
    assert_exact(layout, filled, "In1.Cu")


def test_min_width_above_bridge_width_is_harmless(pcbnew, tmp_path):
    """Plane min width 0.29 mm > bridge 0.12 mm: bridges are footprint zone copper, the fill is exact."""
    layout = sample_layout("hx2_l2_tx_bridged")
    assert layout.spec.bridge_width < 0.29 < layout.spec.web
    path, text, rules = make_board(tmp_path, layout, rig_for(layout, min_width=0.29))
    assert fill_risks(text, layout, "GND", rules) == []
    filled, _ = fill_board(pcbnew, path)
    assert_exact(layout, filled, "In1.Cu")
    _assert_bridge_widths(layout, layout.cut("In1.Cu"), filled["In1.Cu"])


def test_min_width_above_web_is_reported_and_real(pcbnew, tmp_path):
    """Plane min width 0.4 mm > web 0.3 mm: fill_risks says so, and KiCad's fill indeed drops the web."""
    layout = sample_layout("hx2_l0_tx_straight")
    path, text, rules = make_board(tmp_path, layout, rig_for(layout, min_width=0.4))
    risks = fill_risks(text, layout, "GND", rules)
    assert len(risks) == 1 and "min width 0.4 mm" in risks[0] and "0.3 mm wide" in risks[0]
    filled, _ = fill_board(pcbnew, path)
    a, b = layout.cells[0], layout.cells[1]
    mid = ((a.centre[0] + b.centre[0]) / 2, (a.centre[1] + b.centre[1]) / 2)
    web_copper = filled["In1.Cu"].copper.intersection(Point(mid).buffer(0.05))
    assert web_copper.area < 1e-6, "KiCad kept the web although it is narrower than the min width"


def test_missing_rule_is_reported_and_real(pcbnew, tmp_path):
    """Without the .kicad_dru the plane keeps its clearance from a graphic patch: reported, and the slot widens.

    Bridged patches are zone copper on the plane's net, so they need no rule: nothing reported, fill exact.
    """
    layout = sample_layout("hx2_l0_tx_straight")
    (tmp_path / "straight").mkdir()
    path, text, _ = make_board(tmp_path / "straight", layout, rig_for(layout), dru=None)
    risks = fill_risks(text, layout, "GND", None)
    assert len(risks) == 1 and "no .kicad_dru" in risks[0]
    filled, _ = fill_board(pcbnew, path)
    r = slot_report(layout, filled["In1.Cu"], "In1.Cu")
    assert max(r["width_errors"])[0] > 0.3, "the zone clearance 0.5 should have widened the slot"
    layout = sample_layout("hx2_l2_tx_bridged")
    (tmp_path / "bridged").mkdir()
    path, text, _ = make_board(tmp_path / "bridged", layout, rig_for(layout), dru=None)
    assert fill_risks(text, layout, "GND", None) == []
    filled, _ = fill_board(pcbnew, path)
    assert_exact(layout, filled, "In1.Cu")


def test_rule_must_come_last(pcbnew, tmp_path):
    """A user's clearance rule after ours overrides it (reported); merge_rules puts ours last and fixes it."""
    layout = sample_layout("hx2_l1_rx_folded")
    user = ('(version 1)\n# house rule\n(rule "zone_keepback"\n  (layer inner)\n'
            '  (constraint clearance (min 0.3mm))\n  (condition "A.Type == \'Zone\'"))\n')
    ours_first = rules_text(layout) + user.split("\n", 1)[1]
    (tmp_path / "bad").mkdir()
    path, text, rules = make_board(tmp_path / "bad", layout, rig_for(layout), dru=ours_first)
    risks = fill_risks(text, layout, "GND", rules)
    assert len(risks) == 1 and "not the last rule" in risks[0]
    filled, _ = fill_board(pcbnew, path)
    assert max(slot_report(layout, filled["In1.Cu"], "In1.Cu")["width_errors"])[0] > 0.1
    merged = merge_rules(user, rules_text(layout))
    assert merged.startswith(user) and merged.count("(version 1)") == 1
    (tmp_path / "good").mkdir()
    path, text, rules = make_board(tmp_path / "good", layout, rig_for(layout), dru=merged)
    assert fill_risks(text, layout, "GND", rules) == []
    filled, _ = fill_board(pcbnew, path)
    assert_exact(layout, filled, "In1.Cu")


def test_plane_priority_above_patch_zone_is_reported_and_real(pcbnew, tmp_path):
    """A plane ranked above the bridged patch zones empties them: reported; zone_priority_for avoids it."""
    layout = sample_layout("hx2_l2_tx_bridged")
    rig = rig_for(layout, priority=2)
    (tmp_path / "low").mkdir()
    path, text, rules = make_board(tmp_path / "low", layout, rig, priority=1)
    risks = fill_risks(text, layout, "GND", rules)
    assert len(risks) == len(layout.cells) and all("priority 1" in r for r in risks)
    filled, _ = fill_board(pcbnew, path)
    assert filled["In1.Cu"].zones.area < 1e-6
    (tmp_path / "auto").mkdir()
    path, text, rules = make_board(tmp_path / "auto", layout, rig)
    assert re.search(r"\(priority 3\)", text) and fill_risks(text, layout, "GND", rules) == []
    filled, _ = fill_board(pcbnew, path)
    assert_exact(layout, filled, "In1.Cu")


@pytest.mark.parametrize("mode", (1, 2))
@pytest.mark.parametrize("case", ("hx2_l0_tx_straight", "hx2_l2_tx_bridged"))
def test_plane_island_mode_does_not_matter(pcbnew, tmp_path, case, mode):
    """Patches and bridges are footprint copper: the plane's island removal (never, or below 10 mm2) changes nothing."""
    layout = sample_layout(case)
    path, text, rules = make_board(tmp_path, layout, rig_for(layout, island_mode=mode))
    assert "(island_removal_mode" in text and fill_risks(text, layout, "GND", rules) == []
    filled, _ = fill_board(pcbnew, path)
    assert_exact(layout, filled, "In1.Cu")
