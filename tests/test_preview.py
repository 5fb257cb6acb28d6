"""SVG/PNG preview, read back with Python's XML parser, Pillow and shapely.

The SVG is parsed with xml.etree and its path data re-read by hand; the PNG is
opened with Pillow and its chunks listed per the PNG specification (ISO/IEC
15948: 8-byte signature, then length, type, data, CRC per chunk).  Geometry
is checked against the engine's own shapely polygons.
"""
from __future__ import annotations

import os
import re
import struct
import subprocess
import sys
import xml.etree.ElementTree as ET
from functools import reduce
from pathlib import Path

import pytest
from PIL import Image
from shapely.geometry import Polygon
from shapely.ops import unary_union

from ebglayout.checks import Finding
from ebglayout.export import CAUTION
from ebglayout.export.primitives import COLOURS, SIZE_PX, TRACE_ALPHA
from ebglayout.export.preview import write_preview
from ebglayout.export.svg import DECIMALS

SVG_NS = "{http://www.w3.org/2000/svg}"
NOTCH = {
    "cells": [{"modes": [{"f_hz": 7.7e9}, {"f_hz": 15.1e9}], "lc_f_hz": 8.2e9, "notch_hz": 8.2e9},
              {"modes": [{"f_hz": 7.4e9}]}, {"modes": [{"f_hz": 7.1e9}], "lc_f_hz": None}],
    "notch_spread": {"low_hz": 6.8e9, "high_hz": 9.2e9},
    "target_hz": 8e9,
}
NUMBER = re.compile(r"-?\d+(?:\.\d+)?")


def svg_texts(path) -> list[str]:
    """All text the SVG shows, as parsed by xml.etree (text elements and their tspans)."""
    root = ET.parse(path).getroot()
    assert root.tag == f"{SVG_NS}svg"
    return ["".join(t.itertext()) for t in root.iter(f"{SVG_NS}text")]


def board_paths(path) -> dict[str, list[tuple[tuple[float, ...], str]]]:
    """class -> [(transform matrix, path data)] for every path inside a transformed group (board coordinates)."""
    found: dict[str, list] = {}
    for group in ET.parse(path).getroot().iter(f"{SVG_NS}g"):
        transform = group.get("transform", "")
        if not transform.startswith("matrix("):
            continue
        matrix = tuple(float(v) for v in NUMBER.findall(transform))
        for element in group.iter(f"{SVG_NS}path"):
            found.setdefault(element.get("class"), []).append((matrix, element.get("d")))
    return found


def rings_of(d: str) -> list[list[tuple[float, float]]]:
    """Closed subpaths "M x y x y ... Z" (implicit line-tos, as SVG 1.1 section 8.3.2 allows) as vertex lists."""
    rings = []
    for part in d.split("Z"):
        if part.strip():
            assert part.lstrip().startswith("M") and not re.search(r"[A-LN-Za-z]", part), part[:40]
            values = [float(v) for v in NUMBER.findall(part)]
            rings.append(list(zip(values[0::2], values[1::2])))
    return rings


def even_odd_region(d: str):
    """The area an even-odd fill of the path covers: the symmetric difference of its rings."""
    return reduce(lambda a, b: a.symmetric_difference(b), (Polygon(r) for r in rings_of(d)))


def png_chunks(path) -> list[str]:
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    types, at = [], 8
    while at < len(data):
        length, kind = struct.unpack(">I4s", data[at:at + 8])
        types.append(kind.decode("ascii"))
        at += 12 + length
    return types


@pytest.mark.parametrize("name", ["hx2_l0_tx_straight", "hx2_l3_rx_stripline"])
def test_files_written_and_readable(name, sample_layouts, tmp_path):
    """Both files exist and nothing else; the SVG parses and names the filter, both nets and the caution; Pillow
    opens the PNG at the page size; the N trace is hatched (a pattern fill), the P trace plain."""
    layout = sample_layouts[name]
    svg, png = write_preview(layout, tmp_path / "p.svg", tmp_path / "p.png")
    texts = svg_texts(svg)
    assert any(layout.spec.name in t for t in texts)
    assert any(CAUTION in t for t in texts)
    assert any(layout.traces[0].net in t for t in texts) and any(layout.traces[1].net in t for t in texts)
    with Image.open(png) as image:
        assert image.format == "PNG" and image.size == SIZE_PX == (1440, 900)
        image.load()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.png", "p.svg"]
    fills = {e.get("class"): e.get("fill") for e in ET.parse(svg).getroot().iter(f"{SVG_NS}path")}
    assert fills["trace-N"].startswith("url(#") and fills["trace-P"] == COLOURS["P"]


def test_stripline_planes_share_a_panel(sample_layouts, tmp_path):
    """The stripline's two identical plane cuts are drawn once, titled with both layers."""
    svg, _ = write_preview(sample_layouts["hx2_l3_rx_stripline"], tmp_path / "s.svg", tmp_path / "s.png")
    texts = svg_texts(svg)
    assert "plane In1.Cu + In3.Cu (identical cut)" in texts
    assert len(board_paths(svg)["patch"]) == 1


def test_findings_and_notch_drawn(sample_layouts, tmp_path):
    """A finding's rule id appears as SVG text beside its marker; the notch plot appears only when given."""
    layout = sample_layouts["hx2_l2_tx_bridged"]
    findings = [Finding("TEST-ANGLE", "error", "shallow crossing", layout.crossings[0].point, layer="In1.Cu"),
                Finding("TEST-SKEW", "warning", "skew", layout.cells[0].centre)]
    svg, png = write_preview(layout, tmp_path / "f.svg", tmp_path / "f.png", findings=findings, notch=NOTCH)
    texts = svg_texts(svg)
    assert "TEST-ANGLE" in texts and "TEST-SKEW" in texts
    assert "notch estimate per cell" in texts
    plain, _ = write_preview(layout, tmp_path / "g.svg", tmp_path / "g.png")
    assert "TEST-ANGLE" not in svg_texts(plain) and "notch estimate per cell" not in svg_texts(plain)
    with Image.open(png) as image:
        assert image.size == SIZE_PX


def test_byte_identical_writes_without_metadata(sample_layouts, tmp_path):
    """Two writes give identical SVG and PNG bytes; the PNG holds only image chunks (no text, no time)."""
    layout = sample_layouts["hx2_l1_rx_folded"]
    first = write_preview(layout, tmp_path / "a.svg", tmp_path / "a.png", notch=NOTCH)
    second = write_preview(layout, tmp_path / "b.svg", tmp_path / "b.png", notch=NOTCH)
    for one, two in zip(first, second):
        assert one.read_bytes() == two.read_bytes(), one.suffix
    assert set(png_chunks(first[1])) <= {"IHDR", "PLTE", "IDAT", "IEND"}


@pytest.mark.parametrize("name", ["hx2_l0_tx_straight", "hx2_l1_rx_folded", "hx2_l2_tx_bridged",
                                  "hx2_l3_rx_stripline"])
def test_svg_paths_are_the_engine_polygons(name, sample_layouts, tmp_path):
    """Each role's path, re-read and filled even-odd, is the engine's polygon to within the written decimals:
    area and symmetric difference below perimeter x half a unit of the last decimal (shapely computes both)."""
    layout = sample_layouts[name]
    svg, _ = write_preview(layout, tmp_path / "r.svg", tmp_path / "r.png")
    paths = board_paths(svg)
    cut = layout.cuts[0]
    for role in ("patch", "slot", "bridge"):
        engine = cut.role(role)
        if engine.is_empty:
            assert role not in paths
            continue
        drawn = even_odd_region(paths[role][0][1])
        tolerance = engine.length * 0.5 * 10.0 ** -DECIMALS * 2
        assert abs(drawn.area - engine.area) <= tolerance, role
        assert drawn.symmetric_difference(engine).area <= tolerance, role


def test_png_colours_at_board_points(sample_layouts, tmp_path):
    """Board points mapped through the SVG's view matrix land, in the PNG, on the colour of what is there:
    inside a patch, mid-slot, the plane just outside the slot, and the P trace over plane copper."""
    layout = sample_layouts["hx2_l0_tx_straight"]
    svg, png = write_preview(layout, tmp_path / "c.svg", tmp_path / "c.png")
    (a, b, c, d, e, f), _ = board_paths(svg)["patch"][0]
    assert b == c == 0 and a == -d > 0
    px_mm = 1.0 / a
    cut = layout.cuts[0]
    copper = unary_union([t.polygon for t in layout.traces]).buffer(5 * px_mm)
    far = max(cut.patch.geoms, key=lambda p: p.distance(layout.cells[0].patch))
    slot = next(s for s in cut.slot.geoms if s.distance(far) < 1e-6)
    outer = Polygon(slot.exterior)
    plane_near = outer.buffer(8 * px_mm).difference(cut.outline.buffer(2.5 * px_mm))
    p_line = layout.trace("P").centreline
    along = [p_line.interpolate(k / 50, normalized=True) for k in range(1, 50)]
    p_point = next(p for p in along if p.distance(cut.outline) > 1.0 and p.distance(p_line.boundary) > 4.0)
    points = {
        "patch": far.buffer(-3 * px_mm).difference(copper).representative_point(),
        "slot": slot.buffer(-1.6 * px_mm).difference(copper).representative_point(),
        "plane": plane_near.difference(copper).representative_point(),
        "trace": p_point,
    }

    def rgb(colour: str) -> tuple[int, ...]:
        return tuple(int(colour[i:i + 2], 16) for i in (1, 3, 5))

    trace_on_plane = tuple(round(TRACE_ALPHA * t + (1 - TRACE_ALPHA) * p)
                           for t, p in zip(rgb(COLOURS["P"]), rgb(COLOURS["plane"])))
    expected = {"patch": rgb(COLOURS["patch"]), "slot": rgb(COLOURS["slot"]), "plane": rgb(COLOURS["plane"]),
                "trace": trace_on_plane}
    assert expected["slot"] != expected["plane"] != expected["patch"]
    with Image.open(png) as image:
        pixels = image.convert("RGB")
        for role, point in points.items():
            assert not point.is_empty, role
            x, y = a * point.x + c * point.y + e, b * point.x + d * point.y + f
            got = pixels.getpixel((int(x), int(y)))
            assert max(abs(g - w) for g, w in zip(got, expected[role])) <= 1, (role, got, expected[role])


def test_preview_does_not_import_matplotlib(tmp_path):
    """Writing a preview pulls in no plotting library (a fresh interpreter, so other tests cannot mask it)."""
    root = Path(__file__).resolve().parent.parent
    code = ("import sys; from ebglayout.spec import load_spec; from ebglayout.layout import build_layout; "
            "from ebglayout.export.preview import write_preview; "
            f"write_preview(build_layout(load_spec('samples/hx2_l0_tx_straight.toml')), r'{tmp_path}/m.svg', "
            f"r'{tmp_path}/m.png'); print(sorted(m for m in sys.modules if m.split('.')[0] == 'matplotlib'))")
    env = dict(os.environ, PYTHONPATH=str(root))
    out = subprocess.run([sys.executable, "-c", code], cwd=root, env=env, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
