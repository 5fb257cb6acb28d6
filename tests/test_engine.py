"""The geometry engine against independent measurements.

Crossings are recounted by dense sampling of each trace (a method that shares
no code with ebglayout.crossing); slot widths are confirmed by shapely's
morphological erosion (a polygon of width w vanishes when eroded by w/2).
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from shapely.geometry import Polygon

from ebglayout.errors import EbgError, PlacementError, SpecError
from ebglayout.layout import build_layout
from ebglayout.spec import load_spec, spec_from_dict

from conftest import SAMPLE_SPECS

GRID = 1e-6


def sampled_crossings(line, slot, step=0.0005) -> int:
    """Full crossings counted by walking the trace in 0.5 um steps: a run of slot samples with copper on both sides."""
    s = np.arange(0.0, line.length, step)
    pts = shapely.line_interpolate_point(line, s)
    inside = shapely.contains_xy(slot, shapely.get_x(pts), shapely.get_y(pts))
    edges = np.diff(inside.astype(int))
    entries, exits = np.nonzero(edges == 1)[0], np.nonzero(edges == -1)[0]
    if inside[0]:
        exits = exits[1:]
    return int(min(len(entries), len(exits)))


def style_count(spec) -> int:
    """Crossings per trace the style implies (issue text): 2 x count with webs, count + 1 with shared slots; per pass."""
    return (spec.count + 1 if spec.web == 0 else 2 * spec.count) * spec.passes


@pytest.mark.parametrize("path", SAMPLE_SPECS, ids=lambda p: p.stem)
def test_sample_crossings_match_dense_sampling_and_style(path):
    spec = load_spec(path)
    layout = build_layout(spec)
    for cut in layout.cuts:
        for trace in layout.traces:
            engine = len(layout.full_crossings(cut.layer, trace.polarity))
            sampled = sampled_crossings(trace.centreline, cut.slot)
            assert engine == sampled == style_count(spec), (cut.layer, trace.polarity)


@pytest.mark.parametrize("path", SAMPLE_SPECS, ids=lambda p: p.stem)
def test_sample_geometry_is_valid_on_grid_and_deterministic(path):
    spec = load_spec(path)
    first, second = build_layout(spec), build_layout(spec)
    for a, b in zip(first.cuts, second.cuts):
        for role in ("slot", "patch", "bridge", "outline"):
            geom = a.role(role)
            assert geom.is_valid
            assert shapely.to_wkb(geom) == shapely.to_wkb(b.role(role))
            xy = shapely.get_coordinates(geom)
            assert np.allclose(np.round(xy / GRID) * GRID, xy, atol=1e-9, rtol=0)
    for trace in first.traces:
        assert trace.polygon.is_valid and not trace.polygon.is_empty


@pytest.mark.parametrize("path", SAMPLE_SPECS, ids=lambda p: p.stem)
def test_slot_width_by_erosion(path):
    """A strip of width w survives erosion by w/2 - 2 nm and vanishes at w/2 + 2 nm (shapely buffer, mitre joins)."""
    spec = load_spec(path)
    layout = build_layout(spec)
    for cut in layout.cuts:
        assert not cut.slot.buffer(-(spec.slot / 2 - 2e-6), join_style="mitre").is_empty
        assert cut.slot.buffer(-(spec.slot / 2 + 2e-6), join_style="mitre").is_empty
        if spec.style == "bridged":
            # GEOS drops erosion remnants a few nm thin on rotated rectangles; 10 nm still pins the width.
            assert not cut.bridge.buffer(-(spec.bridge_width / 2 - 1e-5), join_style="mitre").is_empty
            assert cut.bridge.buffer(-(spec.bridge_width / 2 + 1e-5), join_style="mitre").is_empty


@pytest.mark.parametrize("path", SAMPLE_SPECS, ids=lambda p: p.stem)
def test_crossings_square_and_clear_of_corners(path):
    """Both traces meet slot edges at 90 deg and at least the corner margin from every patch corner."""
    spec = load_spec(path)
    layout = build_layout(spec)
    corners = shapely.points(np.concatenate([np.asarray(p.exterior.coords) for c in layout.cells for p in [c.patch]]))
    for c in layout.crossings:
        assert c.kind == "full"
        assert c.angle_deg == pytest.approx(90.0, abs=1e-3)
        trace = layout.trace(c.polarity)
        # independent: distance from every patch vertex to the trace copper near this crossing
        near = trace.polygon.intersection(shapely.Point(c.point).buffer(spec.slot * 2))
        assert shapely.distance(corners, near).min() >= spec.corner_margin - 1e-6


def test_cells_are_inside_one_straight_run_and_centred_on_the_pair():
    spec = load_spec(SAMPLE_SPECS[0])
    layout = build_layout(spec)
    centre = layout.centreline
    for cell in layout.cells:
        assert centre.distance(shapely.Point(cell.centre)) < 1e-6
        assert cell.rotation_deg == 0.0
        assert cell.outer.intersection(centre).length == pytest.approx(cell.size[0] + 2 * spec.slot, abs=1e-6)


BASE = {
    "pair": {"width": 0.1, "spacing": 0.1, "path": [[0, 0], [30, 0]]},
    "cut": {"style": "straight", "patch": [3.0, 2.0], "count": 2, "slot": 0.15, "web": 0.3},
    "stackup": {"er": 4.0, "h": 0.1},
}


def with_changes(**groups) -> dict:
    data = {k: dict(v) for k, v in BASE.items()}
    for group, changes in groups.items():
        data.setdefault(group, {}).update(changes)
    return data


def test_generated_fold_turns_cancel_and_each_turn_is_pi_times_pair_pitch():
    """Semicircle arc lengths pi*(R+d) and pi*(R-d) differ by 2*pi*d = pi*(w+s): hand-computed from the arc formula."""
    spec = spec_from_dict(with_changes(cut={"style": "folded", "passes": 5, "patch": [3.0, 3.6]}))
    layout = build_layout(spec)
    assert len(layout.turns) == 4
    for turn in layout.turns:
        assert abs(turn.p_minus_n) == pytest.approx(math.pi * (spec.pair_width + spec.pair_spacing), rel=1e-12)
    signs = [math.copysign(1, t.p_minus_n) for t in layout.turns]
    assert all(a == -b for a, b in zip(signs, signs[1:]))
    p, n = layout.trace("P").centreline.length, layout.trace("N").centreline.length
    assert p - n == pytest.approx(0.0, abs=2e-5)  # arcs discretised within 0.25 um sagitta
    assert len(layout.full_crossings("In1.Cu", "P")) == 5 * 4


def test_prefolded_path_gets_the_row_across_its_lanes():
    """A route drawn as a serpentine: the row is found across its three parallel runs."""
    path = [[0, 0], [20, 0], {"arc": [[20, 0], [20.4, 0.4], [20, 0.8]]}, [2, 0.8],
            {"arc": [[2, 0.8], [1.6, 1.2], [2, 1.6]]}, [25, 1.6]]
    spec = spec_from_dict(with_changes(pair={"path": path},
                                       cut={"style": "folded", "passes": 3, "patch": [3.0, 3.0]}))
    layout = build_layout(spec)
    assert not layout.route_generated
    for trace in layout.traces:
        assert sampled_crossings(trace.centreline, layout.cuts[0].slot) == 3 * 4


def test_bridges_have_the_designed_length_and_sit_off_the_crossed_sides():
    spec = load_spec([p for p in SAMPLE_SPECS if "bridged" in p.stem][0])
    layout = build_layout(spec)
    for cell in layout.cells:
        for bridge in cell.bridges:
            rect = bridge.minimum_rotated_rectangle
            xy = np.asarray(rect.exterior.coords)
            sides = sorted([np.linalg.norm(xy[1] - xy[0]), np.linalg.norm(xy[2] - xy[1])])
            assert sides == pytest.approx([spec.bridge_width, spec.bridge_length], abs=2e-6)
            for trace in layout.traces:
                assert bridge.distance(trace.polygon) > spec.bridge_keep


@pytest.mark.parametrize("changes, error, words", [
    ({"pair": {"width": None}}, SpecError, "pair.width = (missing)"),
    ({"cut": {"patch": [-3.0, 2.0]}}, SpecError, "cut.patch = -3"),
    ({"cut": {"slot": 2.0}}, SpecError, "cut.slot = 2: must be > 0 and < the patch size (2 mm)"),
    ({"cut": {"count": 10}}, PlacementError, "need"),
    ({"pair": {"path": [[0, 0]]}}, SpecError, "pair.path"),
    ({"cut": {"styel": "straight"}}, SpecError, "did you mean 'cut.style'"),
    ({"stackup": {"er": float("nan")}}, SpecError, "stackup.er = nan"),
])
def test_bad_specs_raise_one_line_errors(changes, error, words):
    data = with_changes(**changes)
    for group, values in changes.items():
        for key, value in values.items():
            if value is None:
                del data[group][key]
    with pytest.raises(error) as info:
        build_layout(spec_from_dict(data))
    assert words in str(info.value)
    assert "\n" not in str(info.value)
    assert isinstance(info.value, EbgError) and isinstance(info.value, ValueError)


def test_rotated_path_gives_the_same_cut_rotated():
    """Rotating the path by 30 deg rotates the cut: areas equal, slot width unchanged (erosion test)."""
    c, s = math.cos(math.radians(30)), math.sin(math.radians(30))
    path = [[0, 0], [30 * c, 30 * s]]
    flat = build_layout(spec_from_dict(BASE))
    turned = build_layout(spec_from_dict(with_changes(pair={"path": path})))
    assert turned.cuts[0].slot.area == pytest.approx(flat.cuts[0].slot.area, abs=1e-5)
    assert turned.cells[0].rotation_deg == pytest.approx(30.0)
    assert turned.cuts[0].slot.buffer(-(0.15 / 2 + 3e-6), join_style="mitre").is_empty
    assert isinstance(turned.cells[0].patch, Polygon)


def test_on_grid_equals_geos_snap_rounding(sample_layouts):
    """``on_grid`` gives exactly what GEOS's fixed-precision snap-rounding (shapely.set_precision, 1 nm) gives,
    on the engine's unions (vertices already on the grid: the fast rounding path) and on the same shapes turned
    by 17.3 degrees (vertices off the grid: GEOS itself)."""
    import shapely
    from shapely import affinity

    from ebglayout.units import GRID_MM, on_grid

    shapes = []
    for layout in sample_layouts.values():
        patches = shapely.union_all([c.patch for c in layout.cells])
        outers = shapely.union_all([c.outer for c in layout.cells])
        shapes += [patches, outers, outers.difference(patches)]
    shapes += [affinity.rotate(s, 17.3, origin=(0, 0)) for s in shapes]
    for shape in shapes:
        ours = on_grid(shape)
        assert shapely.get_precision(ours) == 0 and ours.is_valid
        steps = shapely.get_coordinates(ours) / GRID_MM
        assert np.abs(steps - np.rint(steps)).max() < 1e-6
        geos = shapely.set_precision(shape, GRID_MM)
        assert shapely.normalize(ours).equals_exact(shapely.normalize(geos), 0)
