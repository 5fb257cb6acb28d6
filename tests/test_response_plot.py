"""The |Scc21| / |Sdd21| plot (export/response_plot.py): the SVG parses with Python's XML parser and its curves map
back to the data, the PNG decodes with Pillow to the stated size with the curve's colour on the curve, and both
files are byte-stable."""
from __future__ import annotations

import xml.etree.ElementTree as ET

import numpy as np
import pytest

PIL = pytest.importorskip("PIL", reason="Pillow is a dependency of ebglayout (pip install -e .)")
from PIL import Image  # noqa: E402

from ebglayout.export.drawing import COLOURS, SIZE_PX  # noqa: E402
from ebglayout.export.response_plot import plot_frame, source_label, write_response_plot  # noqa: E402
from ebglayout.response import response_json  # noqa: E402
from ebglayout.sparams import mixed_mode  # noqa: E402
from test_response import common_mode_notch_network  # noqa: E402

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
    # the notch is the lowest point of the common-mode curve, and the shaded band spans the stopband
    scc = path_points(root, "scc21")
    assert freq[np.argmax(scc[:, 1])] == pytest.approx(result["scc21"]["notch_hz"] / 1e9)
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
