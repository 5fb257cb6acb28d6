"""The engine-independent full-wave model: geometry, ports and mesh checked in milliseconds, without openEMS."""
from __future__ import annotations

import numpy as np
import pytest
from shapely.geometry import Point, box
from shapely.ops import unary_union

from ebglayout.estimate.lines import microstrip_single, stripline_single
from ebglayout.fullwave.model import EDGE_TOL, PRESETS, build_model, grade, half_model, hole_free
from ebglayout.fullwave.openems import model_xml
from ebglayout.fullwave.run import plan, s_matrix

SAMPLES = ("hx2_l0_tx_straight", "hx2_l2_tx_bridged", "hx2_l3_rx_stripline")


@pytest.fixture(scope="module", params=SAMPLES)
def model_of(request, sample_layouts):
    layout = sample_layouts[request.param]
    return layout, build_model(layout, "default")


def _on_mesh(value: float, lines: np.ndarray) -> bool:
    return bool(np.min(np.abs(lines - value)) < 1e-6)


def test_every_slot_edge_has_a_mesh_line(model_of):
    """Each axis-aligned slot edge of the drawing is a mesh line, so the engine puts copper exactly where the
    polygons say (the engine snaps sheet edges to the nearest line; common practice for FDTD meshing)."""
    _, model = model_of
    mx, my, _ = model.mesh
    assert model.slot_edges
    for axis, value in model.slot_edges:
        assert _on_mesh(value, mx if axis == "x" else my), (axis, value)


def test_model_copper_is_the_drawn_cut(model_of):
    """The plane sheet, turned back into board coordinates, differs from window minus the Layout's slots by no
    area: the model reads the drawn polygons, it does not re-derive them (independent recount by shapely)."""
    layout, model = model_of
    from shapely import affinity

    angle, x0, y0 = model.frame
    for sheet, cut in zip([s for s in model.sheets if s.name.startswith("plane")], layout.cuts):
        copper = unary_union(sheet.polygons)
        board = affinity.translate(affinity.rotate(copper, angle, origin=(0, 0)), x0, y0)
        window = affinity.translate(affinity.rotate(box(*_xy_domain(model)), angle, origin=(0, 0)), x0, y0)
        expected = window.difference(cut.slot)
        assert board.symmetric_difference(expected).area < 1e-6


def _xy_domain(model):
    x0, x1, y0, y1 = model.domain[:4]
    return x0, y0, x1, y1


def test_ports_sit_between_their_trace_and_the_reference_planes(model_of):
    """Every port feed spans from a cut plane's height to the trace height, across the trace's own end, and
    the near end is the end where the trace's path starts (port order of interfaces.md)."""
    layout, model = model_of
    planes = sorted(s.z for s in model.sheets if s.name.startswith("plane"))
    z_pair = next(s.z for s in model.sheets if s.name == "traces")
    assert [p.number for p in model.ports] == [1, 2, 3, 4]
    for port in model.ports:
        trace = model.traces[port.polarity]
        assert sorted(f.z_plane for f in port.feeds) == planes
        for feed in port.feeds:
            assert feed.z_trace == z_pair
            mid = Point(feed.x, 0.5 * (feed.y0 + feed.y1))
            assert trace.distance(mid) < 1e-6
            assert abs((feed.y1 - feed.y0) - layout.spec.pair_width) < 1e-3
    for polarity, near, far in (("P", 1, 3), ("N", 2, 4)):
        start = layout.trace(polarity).centreline.coords[0]
        from shapely import affinity

        angle, x0, y0 = model.frame
        local = affinity.rotate(affinity.translate(Point(start), -x0, -y0), -angle, origin=(0, 0))
        assert abs(model.port(near).feeds[0].x - local.x) < abs(model.port(far).feeds[0].x - local.x)


def test_stripline_ports_feed_both_planes(sample_layouts):
    """Stripline: each terminal is two feeds in parallel, trace to each plane, each of twice the port impedance
    (so the planes cannot take different potentials at the port; measured in the openEMS notes)."""
    model = build_model(sample_layouts["hx2_l3_rx_stripline"], "fast", port_ohm=40.0)
    for port in model.ports:
        assert len(port.feeds) == 2
        assert all(abs(f.resistance - 80.0) < 1e-9 for f in port.feeds)
    assert model.boundaries[4:] == ("PEC", "PEC")


def test_stripline_stack_has_both_cuts_and_both_cavities(sample_layouts):
    """Stripline (In1.Cu / In2.Cu pair / In3.Cu): both plane sheets carry the drawn cut, one on each side of the
    traces at pair_h, and each has its own cavity of height h out to a solid plane (the domain's electric walls at
    z = -h and 2 pair_h + h), as the stack-up says; no sheet or slab is missing or doubled."""
    layout = sample_layouts["hx2_l3_rx_stripline"]
    model = build_model(layout, "fast")
    first, second = layout.stackup.planes
    sheets = {s.name: s for s in model.sheets}
    assert sheets["plane1"].z == 0.0 and sheets["traces"].z == pytest.approx(first.pair.h)
    assert sheets["plane2"].z == pytest.approx(first.pair.h + second.pair.h)
    cut1 = unary_union(sheets["plane1"].polygons)
    cut2 = unary_union(sheets["plane2"].polygons)
    assert cut1.symmetric_difference(cut2).area < 1e-9
    assert cut1.area < box(*cut1.bounds).area - 0.99 * layout.cuts[0].slot.area
    z = [v for slab in model.slabs for v in (slab.z0, slab.z1)]
    top = first.pair.h + second.pair.h
    assert z == pytest.approx([-first.cavity.h, 0.0, 0.0, first.pair.h, first.pair.h, top,
                               top, top + second.cavity.h])
    assert (model.domain[4], model.domain[5]) == pytest.approx((-first.cavity.h, top + second.cavity.h))


def test_thirds_rule_at_trace_edges(sample_layouts):
    """Across each trace's long edges the mesh has a line a third of a cell inside and two thirds outside, and
    none on the edge itself (the thirds rule for metal edges in FDTD; common practice)."""
    model = build_model(sample_layouts["hx2_l0_tx_straight"], "default")
    _, my, _ = model.mesh
    step = model.trace_width / model.preset.trace_cells
    for poly in model.traces.values():
        lo, hi = poly.bounds[1], poly.bounds[3]
        assert not _on_mesh(lo, my) and not _on_mesh(hi, my)
        assert _on_mesh(lo + step / 3, my) and _on_mesh(lo - 2 * step / 3, my)
        assert _on_mesh(hi - step / 3, my) and _on_mesh(hi + 2 * step / 3, my)


def test_slot_has_the_preset_cells_across(sample_layouts):
    """At least ``slot_cells`` cells across each slot arm, and no cell larger than the wavelength limit."""
    layout = sample_layouts["hx2_l0_tx_straight"]
    for name, preset in PRESETS.items():
        model = build_model(layout, name)
        mx = model.mesh[0]
        xs = sorted(v for axis, v in model.slot_edges if axis == "x")
        for a, b in zip(xs[0::2], xs[1::2]):
            inside = np.sum((mx > a + EDGE_TOL) & (mx < b - EDGE_TOL))
            assert inside + 1 >= preset.slot_cells
        steps = np.diff(mx)
        assert steps.max() <= 299792458.0 / model.f_max_hz * 1e3 / np.sqrt(4.1) * preset.max_cell_wavelengths + 1e-9


def test_grading_ratio_and_limits():
    """The grader keeps every fixed line, stays under the cell limits and grows cells by at most ~1.5x."""
    lines = grade([0.0, 0.15, 5.0, 5.15, 10.0], 0.4, [(0.0, 0.15), (5.0, 5.15)], 0.05)
    for v in (0.0, 0.15, 5.0, 5.15, 10.0):
        assert _on_mesh(v, lines)
    d = np.diff(lines)
    assert d.max() <= 0.4 + 1e-9
    assert np.all(d[(lines[:-1] >= 0) & (lines[1:] <= 0.15)] <= 0.05 + 1e-9)
    assert np.max(np.maximum(d[1:] / d[:-1], d[:-1] / d[1:])) < 1.6


def test_hole_free_covers_exactly():
    """Cutting a holed polygon into hole-free strips keeps the area and the outline (shapely recount)."""
    ring = box(0, 0, 5, 3).difference(box(1, 1, 4, 2))
    parts = hole_free(ring)
    assert all(not p.interiors for p in parts)
    assert abs(sum(p.area for p in parts) - ring.area) < 1e-9
    assert unary_union(parts).symmetric_difference(ring).area < 1e-9


def test_symmetry_detection(sample_layouts):
    """The straight sample's cut and pair are mirror-symmetric about the pair's centre line (half domain); the
    bridged sample's staggered cells are not symmetric end to end, so its far-end excitations are run too."""
    straight = build_model(sample_layouts["hx2_l0_tx_straight"], "fast")
    assert straight.symmetric_across and straight.symmetric_along
    assert [d.name for d in plan(straight)] == ["even-near", "odd-near"]
    bridged = build_model(sample_layouts["hx2_l2_tx_bridged"], "fast")
    assert not bridged.symmetric_along
    assert len(plan(bridged)) == 4
    half = half_model(straight, "odd")
    assert half.boundaries[2] == "PEC" and half.domain[2] == 0.0
    assert {p.number for p in half.ports} == {1, 3}
    assert half.cells < straight.cells


def test_xml_is_well_formed_and_complete(sample_layouts):
    """The openEMS input parses as XML and carries one lumped element and two probes per feed."""
    import xml.etree.ElementTree as ET

    model = build_model(sample_layouts["hx2_l3_rx_stripline"], "fast")
    root = ET.fromstring(model_xml(model, {1: 1.0}, 1000, -40.0))
    feeds = sum(len(p.feeds) for p in model.ports)
    assert len(root.findall(".//LumpedElement")) == feeds
    assert len(root.findall(".//ProbeBox")) == 2 * feeds
    assert len(root.findall(".//Excitation")) == 1 + len(model.port(1).feeds)


def test_s_matrix_from_waves_of_a_known_network():
    """Port waves of a known reciprocal 4-port (a matched through line pair) give back its S-matrix: drive each
    port, compute V and I from a, b at 50 ohm, and solve (network algebra, independent of any engine)."""
    rng = np.random.default_rng(1)
    s_true = rng.normal(size=(3, 4, 4)) * 0.2 + 1j * rng.normal(size=(3, 4, 4)) * 0.2
    s_true = 0.5 * (s_true + s_true.transpose(0, 2, 1))
    columns = []
    for k in range(4):
        a = np.zeros((3, 4), complex)
        a[:, k] = 1.0 + 0.3j
        b = np.einsum("fij,fj->fi", s_true, a)
        z = 50.0
        v = np.sqrt(z) * (a + b)
        i = (a - b) / np.sqrt(z)
        columns.append((v, i))
    assert np.allclose(s_matrix(columns, along=False), s_true)


def test_closed_forms_against_published_values():
    """Hammerstad-Jensen: w/h = 1 on er = 10 gives about 48.6 ohm, w/h = 3.0/1.6 on er = 4.4 about 50.6 ohm
    (values from memory of standard microstrip tables).  Cohn's exact stripline form against Wheeler's wide-strip
    approximation Z0 sqrt(er) = 94.15 / (w/b + 0.441) for w/b > 0.35 (from memory), which agree within 1-2 %."""
    assert microstrip_single(1.0, 10.0).z0 == pytest.approx(48.6, rel=0.02)
    assert microstrip_single(3.0 / 1.6, 4.4).z0 == pytest.approx(50.6, rel=0.02)
    assert 1 < microstrip_single(1.0, 10.0).eeff < 10
    for ratio in (0.5, 1.0, 2.0):
        assert stripline_single(ratio, 1.0, 3.6).z0 == pytest.approx(94.15 / (ratio + 0.441) / 3.6**0.5, rel=0.03)
