"""SVG/PNG preview, read back with Python's XML parser and matplotlib's PNG reader."""
from __future__ import annotations

import xml.etree.ElementTree as ET

import matplotlib
import matplotlib.image as mpimg
import pytest

from ebglayout.checks import Finding
from ebglayout.export import CAUTION
from ebglayout.export.preview import DPI, FIGSIZE_IN, write_preview

SVG_NS = "{http://www.w3.org/2000/svg}"
PNG_SHAPE = (round(FIGSIZE_IN[1] * DPI), round(FIGSIZE_IN[0] * DPI), 4)
NOTCH = {
    "cells": [{"modes": [{"f_hz": 7.7e9}, {"f_hz": 15.1e9}], "lc_f_hz": 8.2e9, "notch_hz": 8.2e9},
              {"modes": [{"f_hz": 7.4e9}]}, {"modes": [{"f_hz": 7.1e9}], "lc_f_hz": None}],
    "band": {"low_hz": 6.8e9, "high_hz": 9.2e9},
    "target_hz": 8e9,
}


def svg_texts(path) -> list[str]:
    """All text the SVG shows, as parsed by xml.etree (text elements and their tspans)."""
    root = ET.parse(path).getroot()
    assert root.tag == f"{SVG_NS}svg"
    return ["".join(t.itertext()) for t in root.iter(f"{SVG_NS}text")]


@pytest.mark.parametrize("name", ["hx2_l0_tx_straight", "hx2_l3_rx_stripline"])
def test_files_written_and_readable(name, sample_layouts, tmp_path):
    """Both files exist; the SVG parses as XML; matplotlib's reader opens the PNG at the expected size."""
    layout = sample_layouts[name]
    svg, png = write_preview(layout, tmp_path / "p.svg", tmp_path / "p.png")
    texts = svg_texts(svg)
    assert any(layout.spec.name in t for t in texts)
    assert any(CAUTION in t for t in texts)
    assert any(layout.traces[0].net in t for t in texts) and any(layout.traces[1].net in t for t in texts)
    assert mpimg.imread(png).shape == PNG_SHAPE
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.png", "p.svg"]


def test_stripline_planes_share_a_panel(sample_layouts, tmp_path):
    """The stripline's two identical plane cuts are drawn once, titled with both layers."""
    svg, _ = write_preview(sample_layouts["hx2_l3_rx_stripline"], tmp_path / "s.svg", tmp_path / "s.png")
    assert "plane In1.Cu + In3.Cu (identical cut)" in svg_texts(svg)


def test_findings_and_notch_drawn(sample_layouts, tmp_path):
    """A finding's rule id appears as SVG text beside its marker; the notch plot appears when given."""
    layout = sample_layouts["hx2_l2_tx_bridged"]
    findings = [Finding("TEST-ANGLE", "error", "shallow crossing", layout.crossings[0].point, layer="In1.Cu"),
                Finding("TEST-SKEW", "warning", "skew", layout.cells[0].centre)]
    svg, png = write_preview(layout, tmp_path / "f.svg", tmp_path / "f.png", findings=findings, notch=NOTCH)
    texts = svg_texts(svg)
    assert "TEST-ANGLE" in texts and "TEST-SKEW" in texts
    assert "notch estimate per cell" in texts
    plain, _ = write_preview(layout, tmp_path / "g.svg", tmp_path / "g.png")
    assert "TEST-ANGLE" not in svg_texts(plain) and "notch estimate per cell" not in svg_texts(plain)
    assert mpimg.imread(png).shape == PNG_SHAPE


def test_byte_identical_writes(sample_layouts, tmp_path):
    """Two writes give identical SVG and PNG bytes; matplotlib's global settings are left as they were."""
    layout = sample_layouts["hx2_l1_rx_folded"]
    salt_before = matplotlib.rcParams["svg.hashsalt"]
    first = write_preview(layout, tmp_path / "a.svg", tmp_path / "a.png", notch=NOTCH)
    second = write_preview(layout, tmp_path / "b.svg", tmp_path / "b.png", notch=NOTCH)
    for one, two in zip(first, second):
        assert one.read_bytes() == two.read_bytes(), one.suffix
    assert b"Date" not in first[0].read_bytes() and b"Software" not in first[1].read_bytes()
    assert matplotlib.rcParams["svg.hashsalt"] == salt_before
