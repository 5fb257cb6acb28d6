"""Pairs found on boards: net names, centre-lines rebuilt from the two traces, planes, the engine built under them.

The design truth is the generator's table (tests/boards/make_boards.py): each
trace there is the centre-line offset by +-(width + spacing)/2 (mitred corners,
concentric arcs), written to the board by KiCad's pcbnew or as text.  The
checks measure against the board's own track coordinates, not against the
code under test.
"""
from __future__ import annotations

import importlib.util
import math
import random
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest
import shapely
from shapely.geometry import LineString, box

from ebglayout.errors import SpecError
from ebglayout.kicad.board import parse_board, read_board
from ebglayout.kicad.context import obstacles
from ebglayout.kicad.pair_spec import pair_spec_dict
from ebglayout.kicad.pairs import BoardPair, find_pairs, pair_nets
from ebglayout.kicad.planes import cavity, plane_layers_for, reference_layers, stackup_notes
from ebglayout.layout import build_layout
from ebglayout.path import offset_pieces, piece_points, polyline_of
from ebglayout.spec import Arc, Line, spec_from_dict

HERE = Path(__file__).resolve().parent
SAMPLE = HERE.parent / "samples" / "hx2_hub.kicad_pcb"
STRIPLINE = HERE / "boards" / "hx2_stripline6.kicad_pcb"
UM = 1e-3


def _load_generator():
    spec = importlib.util.spec_from_file_location("make_boards", HERE / "boards" / "make_boards.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


make_boards = _load_generator()


@pytest.fixture(scope="module")
def sample():
    return read_board(SAMPLE)


def design_pieces(path) -> tuple:
    return tuple(Line(p[1], p[2]) if p[0] == "line" else Arc(p[1], p[2], p[3]) for p in path)


def polyline(pieces) -> LineString:
    pts = []
    for piece in pieces:
        more = piece_points(piece)
        pts.extend(more if not pts else more[1:])
    return LineString(pts)


def board_tracks(board, net: str, layer: str) -> LineString | shapely.MultiLineString:
    """The net's track centre-lines on a layer, straight from the board arrays."""
    n, li = board.net_index(net), board.layer_index(layer)
    seg, arc = board.segments, board.arcs
    lines = [LineString([seg.start[k], seg.end[k]]) for k in np.flatnonzero((seg.net == n) & (seg.layer == li))]
    lines += [polyline([Arc(*(tuple(v[k]) for v in (arc.start, arc.mid, arc.end)))])
              for k in np.flatnonzero((arc.net == n) & (arc.layer == li))]
    return shapely.union_all(lines)


def assert_offsets_reproduce_traces(board, pair: BoardPair) -> None:
    """Offsetting the centre-line by +-(w+s)/2 lands on the P and N tracks (within 1 um) along its whole length."""
    for net, sign in ((pair.net_p, 1.0), (pair.net_n, -1.0)):
        offset = offset_pieces(pair.path, sign * pair.pitch / 2)
        tracks = board_tracks(board, net, pair.layer)
        samples = shapely.line_interpolate_point(offset, np.linspace(0, offset.length, 400))
        assert float(shapely.distance(samples, tracks).max()) < UM, net
        covered = tracks.intersection(offset.buffer(UM)).length
        assert covered == pytest.approx(offset.length, abs=4 * UM), net


# ---- names ----

def test_pair_names():
    names = ["", "GND", "+3V3", "HX2_L0_TX_P", "HX2_L0_TX_N", "/usb/HX2_USB_D+", "/usb/HX2_USB_D-",
             "HX2_L3_RX_DP", "HX2_L3_RX_DN", "CLKP", "CLKN", "lane_p", "lane_n", "ONLY_P", "VREF+"]
    assert pair_nets(names) == [
        ("/usb/HX2_USB_D", "/usb/HX2_USB_D+", "/usb/HX2_USB_D-"), ("CLK", "CLKP", "CLKN"),
        ("HX2_L0_TX", "HX2_L0_TX_P", "HX2_L0_TX_N"), ("HX2_L3_RX", "HX2_L3_RX_DP", "HX2_L3_RX_DN"),
        ("lane", "lane_p", "lane_n")]


# ---- the sample board (written by pcbnew) ----

def test_sample_pairs_match_the_design(sample):
    pairs = {p.base: p for p in find_pairs(sample)}
    assert sorted(pairs) == sorted(make_boards.SAMPLE_PAIRS)
    for base, design in make_boards.SAMPLE_PAIRS.items():
        pair = pairs[base]
        assert (pair.net_p, pair.net_n) == design["nets"] and pair.layer == design["layer"]
        assert pair.width == pytest.approx(design["width"], abs=1e-9)
        assert pair.spacing == pytest.approx(design["spacing"], abs=UM)
        truth = design_pieces(design["path"])
        assert [type(p) for p in pair.path] == [type(p) for p in truth]
        assert polyline(pair.path).hausdorff_distance(polyline(truth)) < UM
        assert math.dist(pair.path[0].start, truth[0].start) < UM and math.dist(pair.path[-1].end, truth[-1].end) < UM
        assert pair.fit_error < UM
        assert pair.length == pytest.approx(polyline(truth).length, abs=UM)
        assert_offsets_reproduce_traces(sample, pair)


def test_only_one_pair(sample):
    assert [p.base for p in find_pairs(sample, only="HX2_USB_D+")] == ["HX2_USB_D"]
    assert [p.base for p in find_pairs(sample, only="HX2_L1_RX")] == ["HX2_L1_RX"]
    assert find_pairs(sample, only="GND") == []


def test_lead_ins_are_not_part_of_the_coupled_run(sample):
    """L0 has uncoupled 45-degree lead-ins of different length; the run starts where both traces run parallel.

    Routed lengths follow from offset-curve geometry: offsetting a polyline by d
    with mitred corners shortens (inner side) or lengthens (outer side) it by
    2 d tan(turn / 2) per corner; L0 turns left twice by 45 degrees and P is the
    inner trace.
    """
    pair = next(p for p in find_pairs(sample) if p.base == "HX2_L0_TX")
    assert pair.path[0].start == pytest.approx((97.465, 90.0), abs=UM)
    d, corners = pair.pitch / 2, 2 * 2 * math.tan(math.pi / 8)
    lead_p = math.dist((97.0, 90.6), (97.465, 90.135))
    lead_n = math.dist((96.5, 89.2), (97.165, 89.865)) + (97.465 - 97.165)
    assert pair.length_p == pytest.approx(lead_p + pair.length - d * corners, abs=UM)
    assert pair.length_n == pytest.approx(lead_n + pair.length + d * corners, abs=UM)
    assert pair.length_p == pytest.approx(board_tracks(sample, pair.net_p, "F.Cu").length, abs=1e-9)


def test_straight_runs_exclude_bends(sample):
    pair = next(p for p in find_pairs(sample) if p.base == "HX2_L1_RX")
    runs = pair.straight_runs
    assert len(runs) == 2
    assert runs[0].start == pytest.approx((100.0, 100.0), abs=UM)
    assert runs[0].end == pytest.approx((120.0, 100.0), abs=UM)
    assert runs[1].length == pytest.approx(15.0, abs=UM)
    chamfered = next(p for p in find_pairs(sample) if p.base == "HX2_L0_TX")
    # a 45-degree corner costs each side d * tan(22.5 deg) of straight run (exact offset geometry)
    d = chamfered.pitch / 2
    assert chamfered.straight_runs[0].length == pytest.approx(125.0 - 97.465 - d * math.tan(math.pi / 8), abs=UM)


def test_planes_microstrip_and_warnings(sample):
    pairs = {p.base: p for p in find_pairs(sample)}
    assert pairs["HX2_L0_TX"].plane_layers == ("In1.Cu",) and not pairs["HX2_L0_TX"].stripline
    usb = pairs["HX2_USB_D"]
    assert usb.plane_layers == ("In1.Cu",)
    assert any("In2.Cu carries zone(s) of +3V3 between B.Cu and the GND plane" in w for w in usb.warnings)
    assert plane_layers_for(sample, "B.Cu", "+3V3")[0] == ("In2.Cu",)
    assert reference_layers(sample) == {"F.Cu": ("In1.Cu",), "In1.Cu": (), "In2.Cu": ("In1.Cu",), "B.Cu": ("In1.Cu",)}
    assert plane_layers_for(sample, "In1.Cu", None)[0] == ("In2.Cu",)
    assert plane_layers_for(sample, "B.Cu", None)[0] == ("In2.Cu",)


def test_stripline_pair_gets_both_planes():
    board = read_board(STRIPLINE)
    (pair,) = find_pairs(board)
    design = make_boards.STRIPLINE_PAIRS["HX2_L3_RX"]
    assert pair.base == "HX2_L3_RX" and pair.layer == "In2.Cu" and pair.stripline
    assert pair.plane_layers == ("In1.Cu", "In3.Cu")
    assert polyline(pair.path).hausdorff_distance(polyline(design_pieces(design["path"]))) < UM
    assert_offsets_reproduce_traces(board, pair)


# ---- rebuilt centre-lines on generated boards: chamfers, arcs, shuffled items, reversed traces ----

def random_design(rng: random.Random) -> dict:
    width = rng.choice((0.08, 0.1, 0.127, 0.2))
    spacing = rng.choice((0.1, 0.15, 0.2, 0.3))
    pitch = width + spacing
    x, y, heading = 10.0, 10.0, rng.uniform(0, 2 * math.pi)
    path = []
    for _ in range(rng.randint(2, 5)):
        length = rng.uniform(2 * pitch + 0.05, 6.0)
        end = (x + length * math.cos(heading), y + length * math.sin(heading))
        path.append(("line", (x, y), end))
        x, y = end
        if rng.random() < 0.5:
            heading += math.radians(rng.choice((-90, -45, 45, 90)))
        else:
            radius = rng.uniform(1.5 * pitch, 4.0)
            sweep = math.radians(rng.uniform(20, 120)) * rng.choice((-1, 1))
            side = math.copysign(1.0, sweep)
            cx, cy = x - side * radius * math.sin(heading), y + side * radius * math.cos(heading)
            a0 = math.atan2(y - cy, x - cx)
            mid = (cx + radius * math.cos(a0 + sweep / 2), cy + radius * math.sin(a0 + sweep / 2))
            end = (cx + radius * math.cos(a0 + sweep), cy + radius * math.sin(a0 + sweep))
            path.append(("arc", (x, y), mid, end))
            x, y = end
            heading += sweep
    length = rng.uniform(1.5, 6.0)
    path.append(("line", (x, y), (x + length * math.cos(heading), y + length * math.sin(heading))))
    return {"nets": ("HX2_R_TX_P", "HX2_R_TX_N"), "layer": "F.Cu", "width": width, "spacing": spacing, "path": path}


@pytest.mark.parametrize("seed", range(40))
def test_random_centre_lines_are_rebuilt_within_1um(seed):
    rng = random.Random(seed)
    design = random_design(rng)
    truth = design_pieces(design["path"])
    if not polyline(truth).buffer(design["width"] + design["spacing"]).is_valid or not polyline(truth).is_simple:
        pytest.skip("random path crosses itself")
    text = make_boards.pair_board_text({"R": design}, order_seed=seed, reverse_n=bool(seed % 2))
    board = parse_board(text, f"random{seed}")
    (pair,) = find_pairs(board)
    assert polyline(pair.path).hausdorff_distance(polyline(truth)) < UM
    assert pair.fit_error < UM
    assert pair.spacing == pytest.approx(design["spacing"], abs=UM)
    assert_offsets_reproduce_traces(board, pair)


@pytest.mark.parametrize("version", [8, 9, 10])
def test_pairs_in_newer_dialects(version):
    board = read_board(HERE / "boards" / f"hx2_v{version}.kicad_pcb")
    (pair,) = find_pairs(board)
    design = make_boards.SAMPLE_PAIRS["HX2_L1_RX"]
    assert (pair.net_p, pair.net_n, pair.plane_layers) == (*design["nets"], ("In1.Cu",))
    assert polyline(pair.path).hausdorff_distance(polyline(design_pieces(design["path"]))) < UM
    assert_offsets_reproduce_traces(board, pair)


def test_pair_on_two_layers_gives_one_run_per_layer():
    top = make_boards.SAMPLE_PAIRS["HX2_L0_TX"]
    bottom = dict(make_boards.SAMPLE_PAIRS["HX2_USB_D"], nets=top["nets"])
    board = parse_board(make_boards.pair_board_text({"top": top, "bottom": bottom}), "two_layers")
    pairs = find_pairs(board)
    assert [(p.base, p.layer) for p in pairs] == [("HX2_L0_TX", "F.Cu"), ("HX2_L0_TX", "B.Cu")]
    for pair in pairs:
        assert_offsets_reproduce_traces(board, pair)


def test_uncoupled_nets_are_no_pair():
    design = dict(make_boards.SAMPLE_PAIRS["HX2_L1_RX"])
    design["spacing"] = 2.5
    board = parse_board(make_boards.pair_board_text({"far": design}), "far")
    assert find_pairs(board, max_gap=1.0) == []
    assert len(find_pairs(board, max_gap=3.0)) == 1


# ---- handing the pair to the engine ----

def user_spec(name: str = "hx2_l0_tx_straight") -> dict:
    raw = tomllib.loads((HERE.parent / "samples" / f"{name}.toml").read_text())
    return {k: v for k, v in raw.items() if k in ("cut", "rules", "target")}


def test_engine_builds_the_filter_under_the_pair(sample):
    pair = next(p for p in find_pairs(sample) if p.base == "HX2_L0_TX")
    spec = spec_from_dict(pair_spec_dict(sample, pair, user_spec())[0])
    assert spec.nets == ("HX2_L0_TX_P", "HX2_L0_TX_N") and spec.plane_layers == ("In1.Cu",)
    assert (spec.er, spec.h) == pytest.approx((4.1, 0.1))  # dielectric 2 (In1.Cu to In2.Cu) of the stack-up
    layout = build_layout(spec)
    for trace in layout.traces:
        tracks = board_tracks(sample, trace.net, "F.Cu")
        samples = shapely.line_interpolate_point(trace.centreline, np.linspace(0, trace.centreline.length, 300))
        assert float(shapely.distance(samples, tracks).max()) < UM, f"engine trace {trace.polarity} is off its net"
    outline = shapely.Polygon(spec.plane_outline)
    assert outline.symmetric_difference(sample.outline).area < 1e-9
    assert all(outline.contains(c.outer) for c in layout.cells)


def test_board_stackup_wins_and_a_disagreeing_spec_is_refused_unless_forced(sample):
    """The board's stack-up gives every stack-up key it has; a spec value more than 1 % off is an error naming
    the key, the spec's value and the board's, unless the user forces the spec's values."""
    pair = next(p for p in find_pairs(sample) if p.base == "HX2_L1_RX")
    design, from_board = pair_spec_dict(sample, pair, user_spec())
    # F.Cu pair over In1.Cu: dielectric 1 (0.1 mm, er 3.9) to the pair, dielectric 2 (0.1 mm, er 4.1) beyond it,
    # the cavity's far side being the +3V3 plane on In2.Cu; every layer of both has loss tangent 0.02.
    stack = dict(design["stackup"])
    assert stack.pop("pair_h") == pytest.approx([0.1])
    assert stack == pytest.approx({"er": 4.1, "h": 0.1, "pair_er": 3.9, "tan_d": 0.02})
    assert from_board == {"stackup.er", "stackup.h", "stackup.pair_h", "stackup.pair_er", "stackup.tan_d"}
    within = dict(user_spec(), stackup={"er": 4.12, "h": 0.1004})  # within 1 %: rounding, the board's values used
    assert pair_spec_dict(sample, pair, within)[0]["stackup"]["er"] == pytest.approx(4.1)
    given = dict(user_spec(), stackup={"er": 3.8, "h": 0.09}, plane={"layers": ["In1.Cu"], "net": "GND"}, name="mine")
    with pytest.raises(SpecError, match=r"^stackup\.er = 3\.8: the board's stack-up gives 4\.1 "):
        pair_spec_dict(sample, pair, given)
    with pytest.raises(SpecError, match=r"^stackup\.pair_h = 0\.2: the board's stack-up gives \[0\.1\] mm"):
        pair_spec_dict(sample, pair, dict(user_spec(), stackup={"pair_h": 0.2}))
    forced, from_board = pair_spec_dict(sample, pair, given, stackup_from_spec=True)
    spec = spec_from_dict(forced)
    assert (spec.er, spec.h, spec.pair_er, spec.name) == (3.8, 0.09, 3.9, "mine")
    assert from_board == {"stackup.pair_h", "stackup.pair_er", "stackup.tan_d"}
    assert given["stackup"] == {"er": 3.8, "h": 0.09} and "pair" not in given


def test_stripline_stackup_from_the_board():
    """Stripline on In2.Cu between the GND planes on In1.Cu and In3.Cu of the 6-layer board (hand-read from its
    stack-up): pair_h 0.127 mm to each; pair_er and tan_d in series over the dielectrics used."""
    board = read_board(STRIPLINE)
    pair = next(p for p in find_pairs(board) if p.base == "HX2_L3_RX")
    design, _ = pair_spec_dict(board, pair, user_spec())
    stack = design["stackup"]
    assert stack["pair_h"] == pytest.approx([0.127, 0.127]) and stack["pair_er"] == pytest.approx(3.6)
    # cavity beyond In1.Cu: F.Cu (no plane under the pair, so the next copper layer): dielectric 1, 0.1 mm, er 4.1
    assert (stack["h"], stack["er"]) == pytest.approx((0.1, 4.1))
    # tan d from F.Cu to In4.Cu (the far cavity beyond In3.Cu ends at In4.Cu, the next copper layer):
    # slabs (h, er, tan d) = (0.1, 4.1, 0.02), (0.127, 3.6, 0.01) twice, (0.8, 4.5, 0.02)
    slabs = ((0.1, 4.1, 0.02), (0.127, 3.6, 0.01), (0.127, 3.6, 0.01), (0.8, 4.5, 0.02))
    weights = [h / er for h, er, _ in slabs]
    assert stack["tan_d"] == pytest.approx(sum(w * t for w, (_, _, t) in zip(weights, slabs)) / sum(weights))
    # one er/h pair cannot describe both cavities here (0.1 mm of er 4.1 and 0.8 mm of er 4.5): place says so
    (note,) = stackup_notes(board, pair.layer, list(pair.plane_layers), polyline_of(pair.path))
    assert "beyond In3.Cu (to In4.Cu: 0.8 mm, er 4.5) differs from the one beyond In1.Cu" in note


def test_units_other_than_mm_keep_board_numbers(sample):
    pair = next(p for p in find_pairs(sample) if p.base == "HX2_L1_RX")
    in_mm = spec_from_dict(pair_spec_dict(sample, pair, user_spec())[0])
    mil = user_spec()
    mil["units"] = "mil"
    mil["cut"] = dict(mil["cut"], patch=[v / 0.0254 for v in mil["cut"]["patch"]], slot=mil["cut"]["slot"] / 0.0254,
                      web=mil["cut"]["web"] / 0.0254)
    mil["rules"] = {k: (v / 0.0254 if k in ("min_slot", "min_copper", "corner_margin") else v)
                    for k, v in mil["rules"].items()}
    in_mil = spec_from_dict(pair_spec_dict(sample, pair, mil)[0])
    assert in_mil.path == in_mm.path and in_mil.pair_width == in_mm.pair_width and in_mil.h == in_mm.h


def test_missing_stackup_needs_the_spec(sample):
    design = make_boards.SAMPLE_PAIRS["HX2_L1_RX"]
    text = make_boards.pair_board_text({"x": design})
    board = parse_board(re.sub(r"    \(stackup\n.*?\n    \)\n", "", text, count=1, flags=re.S), "nostack")
    assert board.stackup is None and any("no stack-up" in w for w in board.warnings)
    (pair,) = find_pairs(board)
    assert cavity(board, pair) is None
    with pytest.raises(SpecError, match="stackup.er"):
        pair_spec_dict(board, pair, user_spec())
    spec = spec_from_dict(pair_spec_dict(board, pair, dict(user_spec(), stackup={"er": 4.0, "h": 0.1}))[0])
    assert spec.plane_outline is None and spec.plane_layers == ("In1.Cu",)


# ---- other copper near a cut ----

def brute_force(board, bounds, planes, margin, skip):
    """Reference: every item, one by one, with plain shapely."""
    area = box(*bounds).buffer(margin, join_style="mitre")
    seg, via = board.segments, board.vias
    tracks = set()
    for k in range(len(seg)):
        body = LineString([seg.start[k], seg.end[k]])
        lo = np.minimum(seg.start[k], seg.end[k]) - seg.width[k] / 2
        hi = np.maximum(seg.start[k], seg.end[k]) + seg.width[k] / 2
        if box(*lo, *hi).intersects(area) and board.nets[seg.net[k]] not in skip:
            tracks.add((tuple(body.coords[0]), board.copper_layers[seg.layer[k]]))
    plane_idx = [board.layer_index(p) for p in planes]
    vias = set()
    for k in range(len(via)):
        through = any(via.layers[k, 0] <= p <= via.layers[k, 1] for p in plane_idx)
        if through and box(*(via.at[k] - via.size[k] / 2), *(via.at[k] + via.size[k] / 2)).intersects(area):
            vias.add(tuple(via.at[k]))
    for fp in board.footprints:
        for pad in fp.pads:
            d = math.hypot(*pad.size)
            disc = box(*np.subtract(pad.at, d / 2), *np.add(pad.at, d / 2))
            if set(pad.copper) & set(planes) and disc.intersects(area):
                vias.add(pad.at)
    return tracks, vias


@pytest.mark.parametrize("bounds", [(105, 85, 120, 95), (90, 80, 160, 130), (130, 95, 160, 130), (0, 0, 1, 1)])
def test_obstacles_match_a_brute_force_search(sample, bounds):
    tracks, vias = obstacles(sample, bounds, ["In1.Cu"], margin=1.0, exclude_nets=("HX2_L0_TX_P", "HX2_L0_TX_N"))
    ref_tracks, ref_vias = brute_force(sample, bounds, ["In1.Cu"], 1.0, {"HX2_L0_TX_P", "HX2_L0_TX_N"})
    assert {(t.points[0], t.layer) for t in tracks if len(t.points) == 2} == ref_tracks
    assert {v.at for v in vias} == ref_vias
    assert not {t.net for t in tracks} & {"HX2_L0_TX_P", "HX2_L0_TX_N"}


def test_obstacles_under_the_l0_filter(sample):
    pair = next(p for p in find_pairs(sample) if p.base == "HX2_L0_TX")
    layout = build_layout(spec_from_dict(pair_spec_dict(sample, pair, user_spec())[0]))
    tracks, vias = obstacles(sample, layout.cuts[0].outline.bounds, ["In1.Cu"], exclude_nets=(pair.net_p, pair.net_n))
    irq = [t for t in tracks if t.net == "HX2_IRQ" and t.layer == "B.Cu"]
    assert irq and LineString(irq[0].points).intersects(layout.cuts[0].outline)
    assert vias == ()
    arcs = [t for t in obstacles(sample, (118, 98, 127, 107), ["In1.Cu"])[0] if len(t.points) > 2]
    assert {t.net for t in arcs} == {"HX2_L1_RX_P", "HX2_L1_RX_N"}


def test_close_pairs_equal_brute_force():
    """The x-sweep that joins track ends finds exactly the pairs a brute-force distance matrix finds."""
    from ebglayout.kicad.pair_runs import _close_pairs

    rng = np.random.default_rng(12)
    for n in (0, 1, 2, 50, 800):
        points = np.round(rng.uniform(0, 5, (n, 2)), 1)  # many exact repeats, as chained track ends are
        points[::5] += rng.normal(0, 6e-5, (len(points[::5]), 2))
        tol = 1e-4
        d = np.hypot(*(points[:, None, :] - points[None, :, :]).transpose(2, 0, 1)) if n else np.zeros((0, 0))
        expected = sorted((i, j) for i, j in zip(*np.nonzero(d <= tol)) if i < j)
        assert _close_pairs(points.reshape(-1, 2), tol) == expected
