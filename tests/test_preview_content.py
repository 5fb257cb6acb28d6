"""What the preview shows: other copper, finding labels that stay readable, the whole route, cell numbers as
everywhere else, and the user's units.  Label boxes are measured with FreeType's own metrics of the font the PNG
is drawn with (through Pillow), not with the drawing's estimate; areas are checked against the plane-geometry
formulas for a round via (pi d^2 / 4) and a round-ended track (length x width + pi w^2 / 4)."""
from __future__ import annotations

import math
import re
from itertools import combinations

import numpy as np
import pytest
from PIL import ImageFont
from shapely.affinity import affine_transform
from shapely.geometry import LineString, Point, Polygon, box
from shapely.ops import unary_union

from ebglayout.export.drawing import NOTCH_BOX, build_drawing
from ebglayout.export.png import _font
from ebglayout.export.primitives import CAP, Fill, Markers, Text
from ebglayout.layout import build_layout
from ebglayout.pipeline import make_filter
from ebglayout.spec import spec_from_dict

from test_user_units import MIL_SPEC

import tomllib

OBSTACLE_SPEC = """name = "hx2_l0_tx_crowded"
target = "16Gbps"
[pair]
width = 0.12
spacing = 0.15
path = [[0, 0], [22, 0], [24, 2], [24, 10]]
nets = ["HX2_L0_TX_P", "HX2_L0_TX_N"]
[plane]
layers = ["In1.Cu"]
outline = [[-3, -6], [30, -6], [30, 13], [-3, 13]]
[cut]
patch = [4.6, 2.4]
count = 3
slot = 0.15
web = 0.3
[stackup]
er = 4.1
h = 0.1
[rules]
min_slot = 0.2
corner_margin = 1.1
[obstacles]
tracks = [{path = [[9, -5], [9, 5], [12, 8]], width = 0.2, layer = "F.Cu", net = "HX2_IRQ"}]
vias = [{at = [14.5, 1.6], diameter = 0.5, net = "GND"}, {at = [5, -1.5], diameter = 0.45, net = "HX2_SDA"}]
"""
"""Lane 0 of the HX2 hub with a stray IRQ track and two vias near the cut, and fab rules it fails everywhere:
25 errors and 2 warnings, many at the same places."""


def crowded():
    result = make_filter(spec_from_dict(tomllib.loads(OBSTACLE_SPEC)))
    items = build_drawing(result.layout, result.checks.findings, result.estimate.to_json())
    return result, items


def board_fill(items, role: str):
    """The board-space region (mm) of the Fill of ``role``: even-odd over its rings."""
    fill = next(i for i in items if isinstance(i, Fill) and i.role == role)
    region = Polygon()
    for first, stop in fill.polygons:
        for start, end in fill.rings[first:stop]:
            region = region.symmetric_difference(Polygon(fill.coords[start:end]))
    return fill, region


def measured_box(text: Text):
    """The page box of a label's ink and halo, from FreeType's metrics of the font the PNG uses."""
    font = _font(int(text.size), text.bold, text.mono)
    assert isinstance(font, ImageFont.FreeTypeFont), "DejaVu is not installed here; the PNG would use a bitmap font"
    left, top, right, bottom = font.getbbox(text.text, anchor="ls")
    width = font.getlength(text.text)
    x = text.x - {"start": 0.0, "middle": width / 2, "end": width}[text.anchor]
    return box(x + left - 2, text.y + top - 2, x + right + 2, text.y + bottom + 2)


def test_finding_labels_never_overlap_each_other_the_traces_other_copper_or_other_rings():
    result, items = crowded()
    labels = [i for i in items if isinstance(i, Text) and i.role == "finding-label"]
    boxes = [measured_box(t) for t in labels]
    for (a, ta), (b, tb) in combinations(zip(boxes, labels), 2):
        assert a.intersection(b).area == 0, (ta.text, tb.text)
    fill, _ = board_fill(items, "trace-P")
    a, b, c, d, e, f = fill.view.matrix
    traces = affine_transform(unary_union([t.polygon for t in result.layout.traces]), [a, c, b, d, e, f])
    copper = affine_transform(board_fill(items, "track")[1].union(board_fill(items, "via")[1]), [a, c, b, d, e, f])
    rings = {m.points[0]: Point(m.points[0]).buffer(m.size_px / 2 + m.edge_px / 2)
             for m in items if isinstance(m, Markers) and m.role == "finding"}
    for label, region in zip(labels, boxes):
        assert not region.intersects(traces) and not region.intersects(copper), label.text
        touched = [at for at, ring in rings.items() if region.intersects(ring)]
        assert len(touched) <= 1, (label.text, touched)  # at most the ring it names
    assert {t.text for t in labels} == {f.rule for f in result.checks.findings}, "a rule went unlabelled"


def test_other_copper_is_drawn_at_its_size():
    _, items = crowded()
    _, vias = board_fill(items, "via")
    assert len(vias.geoms) == 2
    expected = sorted(math.pi * d * d / 4 for d in (0.5, 0.45))
    assert sorted(g.area for g in vias.geoms) == pytest.approx(expected, rel=0.01)
    _, track = board_fill(items, "track")
    line = LineString([(9, -5), (9, 5), (12, 8)])
    assert track.area == pytest.approx(line.length * 0.2 + math.pi * 0.1 ** 2, rel=0.01)
    assert track.buffer(1e-9).contains(line)


@pytest.mark.parametrize("far", [10, 60], ids=["sample-route", "long-route"])
def test_the_whole_route_is_framed(far):
    text = OBSTACLE_SPEC.replace("[24, 10]", f"[24, {far}]")
    layout = build_layout(spec_from_dict(tomllib.loads(text)))
    items = build_drawing(layout)
    for trace in layout.traces:
        _, drawn = board_fill(items, f"trace-{trace.polarity}")
        assert drawn.area == pytest.approx(trace.polygon.area, rel=1e-9)


def test_cells_are_numbered_as_in_the_estimate_the_findings_and_the_report():
    result, items = crowded()
    indices = [str(c.index) for c in result.layout.cells]
    assert indices == ["0", "1", "2"]
    assert [t.text for t in items if isinstance(t, Text) and t.role == "cell-number"] == indices
    left, _, right, bottom = NOTCH_BOX
    ticks = [t.text for t in items if isinstance(t, Text) and left <= t.x <= right
             and t.y == pytest.approx(bottom + 7 + CAP * t.size)]
    assert ticks == [str(c["index"]) for c in result.estimate.to_json()["cells"]] == indices


def test_preview_speaks_the_spec_units():
    layout = build_layout(spec_from_dict(tomllib.loads(MIL_SPEC)))
    texts = [t.text for t in build_drawing(layout) if isinstance(t, Text)]
    assert "x (mil)" in texts and "y (mil)" in texts
    assert "181 mil" in texts and "94.5 mil" in texts and "slot 6 mil" in texts
    assert not [t for t in texts if re.search(r"\d mm\b", t)]


def test_net_labels_stay_inside_the_panel_and_apart():
    """The route ends at the panel's right edge, where the N label used to run into the legend."""
    _, items = crowded()
    view = board_fill(items, "trace-P")[0].view
    labels = [t for t in items if isinstance(t, Text) and t.text.startswith(("P: ", "N: "))]
    assert len(labels) == 2
    boxes = [measured_box(t) for t in labels]
    for region in boxes:
        x0, y0, x1, y1 = region.bounds
        assert view.left <= x0 and x1 <= view.right and view.top <= y0 and y1 <= view.bottom
    assert boxes[0].intersection(boxes[1]).area == 0


def test_notch_plot_shows_the_models_notch_and_guaranteed_stopband(sample_layouts):
    """The preview's notch plot draws the circuit model's nominal notch as a line and each guaranteed band as a
    shaded span, on the same linear GHz axis as the target line (checked by the ratio of their page spans)."""
    from ebglayout.estimate import estimate_layout
    from ebglayout.export.primitives import COLOURS, Polyline

    layout = sample_layouts["hx2_l1_rx_folded"]
    notch = estimate_layout(layout, model=True).to_json()
    model = notch["model"]
    bands = model["tolerance"]["guaranteed_stopband_hz"]
    assert bands, "the folded sample's model has a guaranteed stopband to draw"
    items = build_drawing(layout, (), notch)
    shaded = [i for i in items if isinstance(i, Fill) and i.colour == COLOURS["guaranteed"] and i.role == "band"]
    lines = {i.colour: i for i in items if isinstance(i, Polyline) and i.role == "target"}
    assert len(shaded) == len(bands) and set(lines) == {COLOURS["model"], COLOURS["target"]}
    y_model, y_target = lines[COLOURS["model"]].points[0][1], lines[COLOURS["target"]].points[0][1]
    span = np.ptp(shaded[0].coords[:, 1])
    px_per_hz = (y_model - y_target) / (notch["target_hz"] - model["scc21"]["notch_hz"])
    assert span == pytest.approx((bands[0][1] - bands[0][0]) * px_per_hz, rel=1e-6)
    texts = {i.text for i in items if isinstance(i, Text)}
    assert {"guaranteed (model)", "model notch"} <= texts
