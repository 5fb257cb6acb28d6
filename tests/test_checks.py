"""Every rule: a passing case and a failing case built by hand, with the place the finding must point at.

Cases start from a clean engine layout and then change the copper the way a
board can drift from the design (a trace re-routed at an angle, a via dropped
into a patch, a cut moved on one plane), using ``with_copper`` to re-measure.
"""
from __future__ import annotations

import math
from dataclasses import replace

import pytest
import shapely
from shapely.affinity import translate
from shapely.geometry import LineString, Polygon, box

from ebglayout.checks import run_checks
from ebglayout.checks.context import CheckContext
from ebglayout.checks.widths import width_check
from ebglayout.layout import PlaneCut, as_multipolygon, build_layout, trace_from_line, with_copper
from ebglayout.spec import TrackObstacle, ViaObstacle, spec_from_dict

BASE = {
    "pair": {"width": 0.1, "spacing": 0.1, "path": [[0, 0], [20, 0]], "nets": ["HX2_L0_TX_P", "HX2_L0_TX_N"]},
    "cut": {"style": "straight", "patch": [3.0, 2.4], "count": 3, "slot": 0.15, "web": 0.3},
    "stackup": {"er": 4.0, "h": 0.1},
}


def make(**groups):
    data = {k: dict(v) for k, v in BASE.items()}
    for group, changes in groups.items():
        if isinstance(changes, dict):
            data.setdefault(group, {}).update(changes)
        else:
            data[group] = changes
    return build_layout(spec_from_dict(data))


def findings(layout, rule, context=None):
    return [f for f in run_checks(layout, context).findings if f.rule == rule]


def near(at, point, tol=0.05):
    return math.dist(at, point) <= tol


def retrace(layout, p_line: LineString, n_line: LineString):
    spec = layout.spec
    traces = (trace_from_line("P", spec.nets[0], spec.pair_layer, spec.pair_width, p_line),
              trace_from_line("N", spec.nets[1], spec.pair_layer, spec.pair_width, n_line))
    return with_copper(layout, traces=traces)


def test_clean_layout_passes_every_rule():
    report = run_checks(make())
    assert not report.errors and not report.warnings
    assert report.crossings == {"P": 6, "N": 6}
    assert report.min_slot_width == pytest.approx(0.15, abs=2e-6)
    assert report.min_copper_width == pytest.approx(0.3, abs=2e-6)


def test_crossing_count_required_number_and_unequal_pair():
    assert findings(make(rules={"crossings": 6}), "crossing-count") == []
    wrong = findings(make(rules={"crossings": 4}), "crossing-count")
    assert wrong and wrong[0].severity == "error" and wrong[0].value == 6 and wrong[0].limit == 4
    layout = make()
    last = layout.cells[-1]
    # N stops on plane copper short of the last cell: 4 crossings against P's 6.
    stop = last.outer.bounds[0] - 0.2
    shortened = retrace(layout, layout.trace("P").centreline, LineString([(0, -0.1), (stop, -0.1)]))
    errors = findings(shortened, "crossing-count")
    assert any("P crosses 6 slots, N crosses 4" in f.message for f in errors)


def test_trace_running_along_a_slot_is_caught_with_its_length():
    layout = make()
    cell = layout.cells[0]
    x0, y0, x1, y1 = cell.outer.bounds
    y_mid = y1 - 0.075  # centre of the top slot strip
    along = LineString([(x0 + 0.5, y1 + 0.3), (x0 + 0.5, y_mid), (x1 - 0.5, y_mid), (x1 - 0.5, y1 + 0.3)])
    errors = findings(retrace(layout, layout.trace("P").centreline, along), "crossing-along")
    assert errors and "runs" in errors[0].message
    assert errors[0].value == pytest.approx((x1 - 0.5) - (x0 + 0.5) + 2 * 0.075, abs=0.01)
    assert near(errors[0].at, ((x0 + x1) / 2, y_mid), tol=0.1)


def test_sixty_degree_crossing_and_corner_crowding_on_a_bent_path():
    """A bent route re-drawn by hand: it crosses the first cell's slot at 60 deg, and passes 0.2 mm from a patch corner."""
    layout = make()
    cell = layout.cells[0]
    px0, py0, px1, py1 = cell.patch.bounds
    # P: at 60 deg to the slot edge (i.e. 30 deg off the pair direction) through the first cell's left slot.
    left_slot_x = px0 - 0.075
    slope = math.tan(math.radians(30))
    p_line = LineString([(left_slot_x - 2, 0.1 - 2 * slope), (left_slot_x, 0.1), (20, 0.1)])
    # N: straight, but 0.2 mm + half width inside the patch's lower edge, so its copper is 0.2 mm from the corners.
    n_y = py0 + 0.2 + 0.05
    n_line = LineString([(0, n_y), (20, n_y)])
    bent = retrace(layout, p_line, n_line)
    angle = findings(bent, "crossing-angle")
    assert len(angle) == 1 and angle[0].value == pytest.approx(60.0, abs=0.01)
    assert near(angle[0].at, (left_slot_x, 0.1), tol=0.1)
    corner = findings(bent, "corner-margin")
    assert corner and all(f.value == pytest.approx(0.2, abs=1e-4) for f in corner)
    assert near(corner[0].at, (px0 - 0.075, n_y), tol=0.05)


def test_pair_symmetry_flags_a_skewed_slot_edge():
    """A hand-edited cut whose first slot is slanted: P and N cross it at different arc lengths."""
    layout = make()
    cut = layout.cuts[0]
    cell = layout.cells[0]
    x0, y0, x1, y1 = cell.patch.bounds
    skewed_patch = Polygon([(x0 + 0.1, y0), (x1, y0), (x1, y1), (x0 - 0.1, y1)])
    patches = [skewed_patch] + [c.patch for c in layout.cells[1:]]
    patch = as_multipolygon(shapely.union_all(patches))
    slot = as_multipolygon(cut.outline.difference(patch))
    moved = with_copper(layout, cuts=(replace(cut, patch=patch, slot=slot),))
    errors = findings(moved, "crossing-symmetry")
    # Hand-derived: the patch edge leans 0.2 mm over its 2.4 mm height, so at the traces (y = +-0.1, 0.2 apart) it
    # sits 0.2 * 0.2 / 2.4 apart along the pair; the outer slot edge is straight, so the slot's midline, where a
    # crossing is measured, moves half of that: 0.2 * 0.2 / 2.4 / 2 = 0.008333 mm.
    assert errors and errors[0].value == pytest.approx(0.2 * 0.2 / 2.4 / 2, abs=1e-6)
    assert "ps of skew" in errors[0].message
    assert errors[0].at[0] == pytest.approx(x0 - 0.075, abs=0.05)


def test_slot_and_copper_width_minimums():
    assert findings(make(rules={"min_slot": 0.15}), "slot-width") == []
    slots = findings(make(rules={"min_slot": 0.2}), "slot-width")
    assert slots and all(f.value == pytest.approx(0.15, abs=2e-6) and f.limit == 0.2 for f in slots)
    webs = findings(make(cut={"web": 0.05}), "copper-width")
    layout = make(cut={"web": 0.05})
    web_x = (layout.cells[0].outer.bounds[2] + layout.cells[1].outer.bounds[0]) / 2
    assert webs and any(near(f.at, (web_x, f.at[1]), tol=0.01) for f in webs)
    assert all(f.value == pytest.approx(0.05, abs=2e-6) for f in webs)


def test_bridge_keepout_and_symmetry():
    bridged = {"style": "bridged", "bridge": {"width": 0.12, "length": 0.4, "per_side": 1}}
    layout = make(cut=bridged)
    assert findings(layout, "bridge-keepout") == [] and findings(layout, "bridge-symmetry") == []
    close = findings(make(cut=bridged, rules={"bridge_keep": 2.0}), "bridge-keepout")
    # Hand-derived: a bridge runs from the plane's edge (patch half-height 1.2 + slot 0.15) inward by its length 0.4,
    # so it ends at 1.2 - (0.4 - 0.15) = 0.95; the P trace's outer edge is at (0.1 + 0.1) / 2 + 0.1 / 2 = 0.15.
    assert close and close[0].value == pytest.approx(1.2 - (0.4 - 0.15) - 0.15, abs=1e-6)
    cut = layout.cuts[0]
    shifted = [translate(b, 0.3, 0) if i == 0 else b for i, b in enumerate(cut.bridge.geoms)]
    moved = with_copper(layout, cuts=(replace(cut, bridge=as_multipolygon(shapely.union_all(shifted))),))
    asym = findings(moved, "bridge-symmetry")
    assert asym and asym[0].severity == "error"


def test_cells_overlap_and_web_narrower_than_asked():
    layout = make()
    assert findings(layout, "cell-overlap") == []
    spec = replace(layout.spec, web=0.5)
    narrow = findings(replace(layout, spec=spec), "cell-overlap")
    assert len(narrow) == 2 and narrow[0].value == pytest.approx(0.3, abs=1e-6)
    cells = list(layout.cells)
    cells[1] = replace(cells[1], patch=translate(cells[1].patch, -2.0, 0), outer=translate(cells[1].outer, -2.0, 0))
    overlap = findings(replace(layout, cells=tuple(cells)), "cell-overlap")
    assert any("overlap" in f.message for f in overlap)


def test_plane_edge_clearance():
    layout = make(plane={"outline": [[-5, -5], [25, -5], [25, 5], [-5, 5]]})
    assert findings(layout, "plane-edge") == []
    tight = make(plane={"outline": [[-5, -1.5], [25, -1.5], [25, 5], [-5, 5]]})
    errors = findings(tight, "plane-edge")
    assert len(errors) == 3 and all(f.value == pytest.approx(1.5 - 1.35, abs=1e-6) for f in errors)


def test_stripline_both_planes_and_alignment():
    one = make(pair={"layer": "In2.Cu"}, plane={"layers": ["In1.Cu"]})
    assert findings(one, "stripline-cut", CheckContext(sandwiched=True))[0].severity == "error"
    assert findings(one, "stripline-cut", CheckContext(sandwiched=False)) == []
    both = make(pair={"layer": "In2.Cu"}, plane={"layers": ["In1.Cu", "In3.Cu"]})
    assert findings(both, "stripline-cut") == []
    second = both.cuts[1]
    moved_cut = PlaneCut(second.layer, *(as_multipolygon(translate(g, 0.5, 0))
                                          for g in (second.slot, second.patch, second.bridge, second.outline)))
    misaligned = with_copper(both, cuts=(both.cuts[0], moved_cut))
    errors = findings(misaligned, "stripline-cut")
    assert errors and errors[0].value == pytest.approx(100 * (3.0 - 0.5) / 3.0, abs=0.5)


@pytest.mark.parametrize("pair_layer, planes, side", [
    ("In3.Cu", ["In4.Cu", "In5.Cu"], "below"), ("In3.Cu", ["In1.Cu", "In2.Cu"], "above"),
    ("In2.Cu", ["In3.Cu", "B.Cu"], "below"), ("In30.Cu", ["F.Cu", "In29.Cu"], "above")])
def test_stripline_planes_on_one_side_of_the_pair_fail(pair_layer, planes, side):
    """Both cut planes on one side of the pair: the pair is not between them, whatever the overlap (100 % here).
    Without a board the side comes from KiCad's copper layer order: F.Cu, In1.Cu .. In30.Cu, B.Cu (KiCad's
    board file format documentation, layer names)."""
    layout = make(pair={"layer": pair_layer}, plane={"layers": planes})
    (error,) = findings(layout, "stripline-cut")
    assert error.severity == "error" and f"both lie {side} {pair_layer}" in error.message
    rule = next(r for r in run_checks(layout).results if r.rule == "stripline-cut")
    assert rule.worst == pytest.approx(100.0)  # aligned: only the sides are wrong


def test_stripline_planes_follow_the_board_order_and_references():
    """With a board, its copper order decides the sides and its planes next to the pair must be the cut planes."""
    layout = make(pair={"layer": "In2.Cu"}, plane={"layers": ["In1.Cu", "In3.Cu"]})
    order = ("F.Cu", "In1.Cu", "In2.Cu", "In3.Cu", "In4.Cu", "B.Cu")
    good = CheckContext(copper_layers=order, pair_planes=("In1.Cu", "In3.Cu"))
    assert findings(layout, "stripline-cut", good) == []
    other = CheckContext(copper_layers=order, pair_planes=("In1.Cu", "In4.Cu"))
    (error,) = findings(layout, "stripline-cut", other)
    assert "the planes next to In2.Cu under the pair are In1.Cu and In4.Cu" in error.message
    flipped = ("F.Cu", "In2.Cu", "In1.Cu", "In3.Cu", "B.Cu")  # a board order in which both lie below the pair
    (error,) = findings(layout, "stripline-cut", CheckContext(copper_layers=flipped))
    assert "both lie below In2.Cu" in error.message


def test_other_nets_tracks_and_vias():
    layout = make()
    cell = layout.cells[1]
    x0, y0, x1, y1 = cell.outer.bounds
    crossing_track = TrackObstacle(((cell.centre[0], y1 + 2), (cell.centre[0], y1 - 0.5)), 0.1, "F.Cu", "HX2_SPI_CLK")
    far_track = TrackObstacle(((0, 5), (20, 5)), 0.1, "F.Cu", "HX2_SPI_CLK")
    other_layer = TrackObstacle(((cell.centre[0], 3), (cell.centre[0], -3)), 0.1, "B.Cu", "HX2_RESET")
    ctx = CheckContext(tracks=(crossing_track, far_track, other_layer))
    errors = findings(layout, "foreign-track", ctx)
    assert len(errors) == 1 and "crosses a slot" in errors[0].message
    assert errors[0].at[1] == pytest.approx(y1 - 0.075, abs=0.08)
    via_in_patch = ViaObstacle((cell.centre[0], 0.8), 0.3, "GND")
    via_near_slot = ViaObstacle((cell.centre[0], y1 + 0.3), 0.3, "HX2_SPI_CLK")
    via_far = ViaObstacle((x1 + 3, 3), 0.3, "GND")
    vias = findings(layout, "foreign-via", CheckContext(vias=(via_in_patch, via_near_slot, via_far)))
    assert [(f.severity, f.at) for f in vias] == [("error", (cell.centre[0], 0.8)), ("warning", (cell.centre[0], y1 + 0.3))]


@pytest.mark.parametrize("stripline", [True, False], ids=["stripline", "microstrip"])
def test_fold_skew_measures_a_detour_between_crossings(stripline):
    """The N trace takes a 45-degree detour of 2 * sqrt(0.5^2 + 0.5^2) - 1 mm extra over the first cell.

    Stripline: a TEM line in one dielectric carries its wave at c / sqrt(er) (Pozar, Microwave Engineering, 4th ed.,
    sec. 3.7, from memory), so the skew is exactly extra * sqrt(er) / c.  Microstrip: its effective permittivity
    lies between 1 (air) and er (Pozar, sec. 3.8, from memory), so the skew lies between those two delays.
    """
    layout = make(pair={"layer": "In2.Cu"}, plane={"layers": ["In1.Cu", "In3.Cu"], "net": "GND"}) if stripline \
        else make()
    assert findings(layout, "fold-skew") == []
    cell = layout.cells[0]
    cx = cell.centre[0]
    detour = LineString([(0, -0.1), (cx - 0.5, -0.1), (cx, -0.6), (cx + 0.5, -0.1), (20, -0.1)])
    skewed = retrace(layout, layout.trace("P").centreline, detour)
    errors = findings(skewed, "fold-skew")
    extra = 2 * math.hypot(0.5, 0.5) - 1.0
    delay_ps = extra * 1e-3 / 299792458 * 1e12  # in air
    assert errors
    if stripline:
        assert errors[0].value == pytest.approx(delay_ps * math.sqrt(4.0), rel=1e-3)
    else:
        assert delay_ps < errors[0].value < delay_ps * math.sqrt(4.0)


def test_notch_target_without_estimate_uses_the_cavity_formula():
    """f10 = c / (2 a sqrt(er)) (cavity model; Balanis, Antenna Theory, 3rd ed., sec. 14.2.2, from memory): a = 3 mm,
    er = 4 gives 24.98 GHz."""
    on = make(target="25GHz")
    assert findings(on, "notch-target") == []
    off = findings(make(target="12GHz"), "notch-target")
    assert len(off) == 3 and off[0].severity == "warning"
    assert off[0].value == pytest.approx(100 * (299792458 / (2 * 3e-3 * 2) / 12e9 - 1), rel=1e-6)


def test_notch_target_light_check_holds_the_target_within_target_tolerance_of_the_notch_spread():
    """The light check (an estimate without the model, as board re-checks make): the target against the spread of
    the cells' f10 = c / (2 a sqrt(er)) over er +-5 % and h (Pozar, Microwave Engineering, 4th ed., sec. 9.7, from
    memory): a = 3 mm, er = 4 gives 24.98 GHz, so er * 1.05 puts the spread's low end at 24.98 / sqrt(1.05)."""
    from ebglayout.checks import run_checks
    from ebglayout.estimate import estimate_layout

    low = 299792458 / (2 * 3e-3 * 2) / math.sqrt(1.05)
    for tolerance, warned in ((0.15, True), (0.55, False)):
        layout = make(target="12GHz", rules={"target_tolerance": tolerance})
        estimate = estimate_layout(layout)
        assert estimate.rejection is None
        found = [f for f in run_checks(layout, estimate=estimate).findings if f.rule == "notch-target"]
        assert bool(found) is warned
        if warned:
            assert found[0].value == pytest.approx(100 * abs(12e9 / low - 1), rel=0.01)
            assert found[0].limit == pytest.approx(100 * tolerance)


def test_widths_agree_with_klayout_width_and_space_checks(tmp_path):
    """KLayout's own width check (Projection metric) finds the same narrow places as ebglayout's, on shapes with violations."""
    kdb = pytest.importorskip("klayout.db")
    import gdstk

    shapes = [
        box(0, 0, 3, 0.15),                                           # a 0.15 wide strip
        Polygon([(5, 0), (8, 0), (8, 0.3), (6.6, 0.3), (6.6, 0.08), (6.4, 0.08), (6.4, 0.3), (5, 0.3)]),  # a 0.08 neck
        Polygon([(10, 0), (11.8, 2.4), (11.76, 2.43), (9.96, 0.03)]),  # a 0.05 sliver along (3, 4), on the grid
        box(15, 0, 16, 1).difference(box(15.12, 0.12, 15.88, 0.88)),   # a ring 0.12 wide
    ]
    limit = 0.1
    ours = sorted((round(n.width, 4), round(n.at[0], 1)) for s in shapes for n in width_check(s, limit)[1])
    # Hand-derived: the neck is 0.08 wide, centred at x = (6.4 + 6.6) / 2 = 6.5; the sliver's long edges run along
    # (0.6, 0.8) and are offset by (-0.04, 0.03), so it is |(-0.04, 0.03) . (-0.8, 0.6)| = 0.032 + 0.018 = 0.05 wide,
    # centred at x = (10 + 11.8 + 11.76 + 9.96) / 4 = 10.88; the strip (0.15) and the ring (0.12) pass 0.1.
    assert ours == [(0.05, 10.9), (0.08, 6.5)]
    lib = gdstk.Library(unit=1e-3, precision=1e-9)
    cell = lib.new_cell("WIDTHS")
    for s in shapes:
        for piece in gdstk.boolean([gdstk.Polygon(list(s.exterior.coords)[:-1])],
                                   [gdstk.Polygon(list(r.coords)[:-1]) for r in s.interiors], "not"):
            cell.add(piece)
    path = tmp_path / "widths.gds"
    lib.write_gds(path)
    ly = kdb.Layout()
    ly.read(str(path))
    top = ly.top_cell()
    region = kdb.Region(top.begin_shapes_rec(ly.layer(0, 0)))
    mm = ly.dbu * 1e-3  # KLayout's database unit is in micrometres
    pairs = region.width_check(int(round(limit / mm)), False, kdb.Metrics.Projection)
    theirs = sorted({(round(p.distance() * mm, 4), round(p.bbox().center().x * mm, 1)) for p in pairs.each()})
    assert sorted(set(ours)) == theirs
    assert {w for w, _ in theirs} == {0.08, 0.05}
