"""The |Scc21| / |Sdd21| plot (export/response_plot.py): the SVG parses with Python's XML parser and its curves map
back to the data, the PNG decodes with Pillow to the stated size with the curve's colour on the curve, and both
files are byte-stable."""
from __future__ import annotations

import xml.etree.ElementTree as ET

import numpy as np
import pytest

from PIL import Image

from ebglayout.export.primitives import COLOURS, SIZE_PX
from ebglayout.export.response_plot import plot_frame, source_label, write_response_plot
from ebglayout.response import corners_json, db20, response_json
from ebglayout.sparams import mixed_mode
from test_response import common_mode_notch_network

SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture(scope="module")
def result():
    network, _, _ = common_mode_notch_network()
    return response_json(mixed_mode(network), source="full-wave: openEMS 0.0.33 FDTD, preset default",
                         target_hz=8.1e9)


def path_points(root, role: str) -> np.ndarray:
    (path,) = [p for p in root.iter(f"{SVG}path") if p.get("class") == role]
    return np.array(path.get("d").lstrip("M").split(), dtype=float).reshape(-1, 2)


def test_svg_curves_map_back_to_the_data(result, tmp_path):
    svg, png = write_response_plot(result, tmp_path / "r.svg", tmp_path / "r.png", name="hx2_l0_tx_straight")
    root = ET.parse(svg).getroot()
    assert root.get("viewBox") == f"0 0 {SIZE_PX[0]} {SIZE_PX[1]}"
    assert root.find(f"{SVG}title").text == "hx2_l0_tx_straight: |Scc21| and |Sdd21|, full-wave (openEMS)"
    frame = plot_frame(result)
    left, top, right, bottom = frame.box
    freq = np.asarray(result["freq_hz"]) / 1e9
    for role in ("scc21", "sdd21"):
        points = path_points(root, role)
        assert len(points) == len(freq)
        # inverse mapping: page px back to GHz and dB (2 decimals of a px are the SVG's precision)
        ghz = frame.ghz0 + (points[:, 0] - left) / (right - left) * (frame.ghz1 - frame.ghz0)
        db = frame.db1 - (points[:, 1] - top) / (bottom - top) * (frame.db1 - frame.db0)
        px_ghz = (frame.ghz1 - frame.ghz0) / (right - left)
        px_db = (frame.db1 - frame.db0) / (bottom - top)
        for k in (0, 37, 120, len(freq) - 1):
            assert ghz[k] == pytest.approx(freq[k], abs=0.01 * px_ghz)
            expected = min(max(result[f"{role}_db"][k], frame.db0), frame.db1)
            assert db[k] == pytest.approx(expected, abs=0.01 * px_db)
    # the notch is at the lowest point of the common-mode curve, and the shaded band spans the stopband
    scc = path_points(root, "scc21")
    step = freq[1] - freq[0]
    assert freq[np.argmax(scc[:, 1])] == pytest.approx(result["scc21"]["notch_hz"] / 1e9, abs=step / 2)
    (band,) = [p for p in root.iter(f"{SVG}path") if p.get("class") == "stopband"]
    xs = np.array(band.get("d").lstrip("M").rstrip("Z").split(), dtype=float).reshape(-1, 2)[:, 0]
    low, high = (frame.ghz0 + (x - left) / (right - left) * (frame.ghz1 - frame.ghz0) for x in (xs.min(), xs.max()))
    assert (low, high) == pytest.approx(tuple(np.array(result["scc21"]["stopband_hz"]) / 1e9), abs=0.01 * px_ghz)
    (threshold,) = [p for p in root.iter(f"{SVG}path") if p.get("class") == "threshold"]
    y = float(threshold.get("d").lstrip("M").split()[1])
    assert frame.db1 - (y - top) / (bottom - top) * (frame.db1 - frame.db0) == pytest.approx(-10.0, abs=0.01)
    texts = " ".join(t.text for t in root.iter(f"{SVG}text"))
    assert "target 8.1 GHz" in texts and "CAUTION:" in texts

    image = Image.open(png)
    image.load()
    assert image.size == SIZE_PX
    # Pillow's own decoder: a pixel in the middle of a flat stretch of the Scc21 curve carries its colour
    rgb = image.convert("RGB")
    x, y = (int(round(v)) for v in scc[20])
    colour = tuple(int(COLOURS["notch"][i:i + 2], 16) for i in (1, 3, 5))
    assert colour in [rgb.getpixel((x + dx, y + dy)) for dx in (-1, 0, 1) for dy in (-1, 0, 1)]


def test_plot_files_are_byte_stable(result, tmp_path):
    a = write_response_plot(result, tmp_path / "a.svg", tmp_path / "a.png")
    b = write_response_plot(result, tmp_path / "b.svg", tmp_path / "b.png")
    assert a[0].read_bytes() == b[0].read_bytes() and a[1].read_bytes() == b[1].read_bytes()


def test_source_labels():
    assert source_label("full-wave: openEMS 0.0.33 FDTD, preset default") == "full-wave (openEMS)"
    assert source_label("model: transmission-line cells") == "model"


def test_band_rejected_at_every_corner_is_drawn_where_corners_json_puts_it(tmp_path):
    """Three shifted resonators as tolerance corners: the striped band spans corners_json's guaranteed band."""
    curves = {}
    for k in (0.98, 1.0, 1.02):
        network, _, _ = common_mode_notch_network(8e9 * k)
        curves[f"er x{k}"] = db20(mixed_mode(network).scc21)
    network, _, _ = common_mode_notch_network()
    mm = mixed_mode(network)
    tolerance = corners_json(mm.freq_hz, curves)
    data = response_json(mm, source="model: test", target_hz=8e9, extra={"tolerance": tolerance})
    svg, _ = write_response_plot(data, tmp_path / "t.svg", tmp_path / "t.png")
    root = ET.parse(svg).getroot()
    frame = plot_frame(data)
    left, _, right, _ = frame.box
    ((low, high),) = tolerance["guaranteed_stopband_hz"]
    (band,) = [p for p in root.iter(f"{SVG}path") if p.get("class") == "guaranteed"]
    xs = np.array(band.get("d").lstrip("M").rstrip("Z").split(), dtype=float).reshape(-1, 2)[:, 0]
    found = [frame.ghz0 + (x - left) / (right - left) * (frame.ghz1 - frame.ghz0) for x in (xs.min(), xs.max())]
    px_ghz = (frame.ghz1 - frame.ghz0) / (right - left)
    assert found == pytest.approx([low / 1e9, high / 1e9], abs=0.01 * px_ghz)
    texts = " ".join(t.text for t in root.iter(f"{SVG}text"))
    assert "rejected at all 3 corners" in texts and f"all reject {low / 1e9:.4g}-{high / 1e9:.4g} GHz" in texts
