"""Reading a transmission curve (ebglayout/response.py) against curves whose notch and stopband edges are known
in closed form, and against a resonator network built in scikit-rf.

References:
- Single-pole notch (a resonator that takes power out of a through path, Lorentzian in f^2 - f0^2; e.g.
  Pozar, Microwave Engineering, 4th ed., series and parallel resonators, from memory):
  |S|^2 = x^2 / (1 + x^2), x = (f^2 - f0^2) / (f Bw).  |S|^2 = t at x^2 = t / (1 - t), so the edges solve
  f^2 -/+ k Bw f - f0^2 = 0 with k = sqrt(t / (1 - t)):  f = (-/+ k Bw + sqrt(k^2 Bw^2 + 4 f0^2)) / 2.
- Series R-L-C to ground across a line between Z0 ports: S21 = 2 Z / (2 Z + Z0), Z = R + j(wL - 1/(wC))
  (ABCD of a shunt impedance, Pozar table 4.1, from memory).  With R = 0, |S21|^2 = t at X = +/- Z0 k / 2,
  k = sqrt(t / (1 - t)), so w L - 1/(w C) = +/- Z0 k / 2 and w = (+/- Z0 k / 2 + sqrt(Z0^2 k^2 / 4 + 4 L / C)) / (2 L).
"""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
import skrf

from ebglayout.errors import EbgError
from ebglayout.response import (DB_FLOOR, CurveSummary, corners_json, db20, format_response, guaranteed_stopband,
                                response_json, response_json_text, summarize)


def lorentz_db(freq: np.ndarray, f0: float, bw: float) -> np.ndarray:
    x = (freq ** 2 - f0 ** 2) / (freq * bw)
    return db20(np.sqrt(x ** 2 / (1 + x ** 2)))


def lorentz_edges(f0: float, bw: float, threshold_db: float) -> tuple[float, float]:
    t = 10 ** (threshold_db / 10)
    k = math.sqrt(t / (1 - t))
    root = math.sqrt(k ** 2 * bw ** 2 + 4 * f0 ** 2)
    return ((-k * bw + root) / 2, (k * bw + root) / 2)


GRID = np.linspace(2e9, 14e9, 241)  # 50 MHz steps
STEP = GRID[1] - GRID[0]


def edge_tolerance(curve_db, edge_hz: float, step: float, start: float = GRID[0]) -> float:
    """Bound on the error of an edge found by linear interpolation in dB between the grid points that bracket it
    (grid of ``step`` from ``start``): the textbook bound h^2/8 max|g''| over that cell, turned into frequency
    through the slope at the edge, with a factor 1.5 for the linearised mapping."""
    left = start + math.floor((edge_hz - start) / step) * step
    d = step / 100
    probe = np.linspace(left, left + step, 21)
    second = (curve_db(probe + d) - 2 * curve_db(probe) + curve_db(probe - d)) / d ** 2
    slope = (curve_db(np.array([edge_hz + d])) - curve_db(np.array([edge_hz - d])))[0] / (2 * d)
    return 1.5 * step ** 2 / 8 * np.abs(second).max() / abs(slope)


@pytest.mark.parametrize("threshold_db, bw", [(-10.0, 1.2e9), (-20.0, 4e9), (-3.0, 1.2e9)])
def test_single_pole_notch_edges_match_the_closed_form(threshold_db, bw):
    f0 = 7.433e9  # off the grid on purpose
    summary = summarize(GRID, lorentz_db(GRID, f0, bw), threshold_db)
    low, high = lorentz_edges(f0, bw, threshold_db)
    curve = lambda f: lorentz_db(f, f0, bw)  # noqa: E731
    for found, exact in zip(summary.stopband_hz, (low, high)):
        tolerance = edge_tolerance(curve, exact, STEP)
        assert tolerance < 0.3 * STEP  # a bound that nearest-grid-point edges would not meet
        assert found == pytest.approx(exact, abs=tolerance)
    # the parabola through |S|^2 finds the centre between grid points (the nearest grid point is 17 MHz off)
    assert abs(summary.notch_hz - f0) <= 0.02 * STEP
    deepest = GRID[np.argmin(np.abs(GRID - f0))]
    assert summary.depth_db == pytest.approx(lorentz_db(np.array([deepest]), f0, bw)[0])
    assert summary.threshold_db == threshold_db
    assert not summary.notch_at_grid_edge and summary.stopband_clipped == (False, False)
    # halving the step shrinks the edge error about fourfold (second-order interpolation), checked loosely
    fine = np.linspace(GRID[0], GRID[-1], 2 * len(GRID) - 1)
    error_coarse = abs(summary.stopband_hz[1] - high)
    error_fine = abs(summarize(fine, lorentz_db(fine, f0, bw), threshold_db).stopband_hz[1] - high)
    assert error_fine < 0.5 * error_coarse + 1.0


def test_series_resonator_shunt_network_from_scikit_rf():
    L, C, Z0 = 2.0e-9, 0.2e-12, 50.0
    freq = skrf.Frequency(4, 12, 801, "GHz")
    media = skrf.media.DefinedGammaZ0(freq, z0=Z0)
    network = media.shunt(media.inductor(L) ** media.capacitor(C) ** media.short())
    summary = summarize(freq.f, db20(network.s[:, 1, 0]))
    k = math.sqrt(0.1 / 0.9)
    root = math.sqrt(Z0 ** 2 * k ** 2 / 4 + 4 * L / C)
    low, high = ((s * Z0 * k / 2 + root) / (2 * L) / (2 * math.pi) for s in (-1, 1))
    step = freq.f[1] - freq.f[0]
    assert summary.stopband_hz[0] == pytest.approx(low, abs=0.05 * step)
    assert summary.stopband_hz[1] == pytest.approx(high, abs=0.05 * step)
    assert abs(summary.notch_hz - 1 / (2 * math.pi * math.sqrt(L * C))) <= 0.02 * step
    # with a series R the floor of the notch is 2R / (2R + Z0): the sampled depth cannot go below it
    lossy = media.shunt(media.inductor(L) ** media.capacitor(C) ** media.resistor(1.0) ** media.short())
    depth = summarize(freq.f, db20(lossy.s[:, 1, 0])).depth_db
    assert 20 * math.log10(2 / 52) - 1e-9 <= depth < 20 * math.log10(2 / 52) + 3


def test_no_dip_notch_at_the_edge_and_two_dips():
    shallow = lorentz_db(GRID, 7e9, 1e9) * 0 - 3.0 + 0.1 * np.sin(GRID / 1e9)
    s = summarize(GRID, shallow)
    assert s.stopband_hz is None and s.depth_db > -10
    assert s.as_json()["stopband_hz"] is None

    edge = summarize(GRID, lorentz_db(GRID, 1.9e9, 2e9))  # notch just below the sweep
    assert edge.notch_hz == GRID[0] and edge.notch_at_grid_edge
    assert edge.stopband_hz[0] == GRID[0] and edge.stopband_clipped == (True, False)
    high = lorentz_edges(1.9e9, 2e9, -10)[1]
    assert edge.stopband_hz[1] == pytest.approx(high, abs=edge_tolerance(lambda f: lorentz_db(f, 1.9e9, 2e9),
                                                                         high, STEP))

    # two dips, the one at 10 GHz deeper (its own grid point is closer to its centre): the stopband is that one
    two = np.minimum(lorentz_db(GRID, 5.02e9, 0.6e9), lorentz_db(GRID, 10.0e9, 0.8e9))
    s = summarize(GRID, two)
    assert s.notch_hz == pytest.approx(10e9, abs=0.02 * STEP)
    low = lorentz_edges(10e9, 0.8e9, -10)[0]
    assert s.stopband_hz[0] == pytest.approx(low, abs=edge_tolerance(lambda f: lorentz_db(f, 10e9, 0.8e9),
                                                                     low, STEP))
    bands = guaranteed_stopband(GRID, [two], -10.0)
    assert len(bands) == 2 and bands[0][1] < 6e9 < bands[1][0]


def test_guaranteed_stopband_is_the_hand_computed_intersection_of_shifted_copies():
    f0, bw = 8e9, 3e9
    shifts = (0.98, 1.0, 1.025)
    curves = [lorentz_db(GRID, f0 * k, bw) for k in shifts]
    edges = [lorentz_edges(f0 * k, bw, -10.0) for k in shifts]
    expected = (max(lo for lo, _ in edges), min(hi for _, hi in edges))
    bands = guaranteed_stopband(GRID, curves, -10.0)
    assert len(bands) == 1
    assert expected[1] - expected[0] > 4 * STEP  # the copies overlap, but far from fully
    for found, exact, k in ((bands[0][0], expected[0], max(shifts)), (bands[0][1], expected[1], min(shifts))):
        assert found == pytest.approx(exact, abs=edge_tolerance(lambda f: lorentz_db(f, f0 * k, bw), exact, STEP))
    summary = corners_json(GRID, {f"er x{k}": c for k, c in zip(shifts, curves)})
    assert [c["label"] for c in summary["corners"]] == ["er x0.98", "er x1.0", "er x1.025"]
    np.testing.assert_allclose(summary["guaranteed_stopband_hz"], [bands[0]], atol=1.0)
    assert summary["worst_depth_db"] == max(c["depth_db"] for c in summary["corners"])
    # copies shifted apart by more than a stopband share nothing
    assert guaranteed_stopband(GRID, [lorentz_db(GRID, 6e9, 0.5e9), lorentz_db(GRID, 10e9, 0.5e9)], -10.0) == []


def test_bad_curves_are_one_line_errors():
    curve = lorentz_db(GRID, 7e9, 1e9)
    curve[40] = np.nan
    with pytest.raises(EbgError, match=r"^s_db = nan at 4 GHz \(1 point\(s\)\): every value must be a finite"):
        summarize(GRID, curve)
    with pytest.raises(EbgError, match="strictly increasing"):
        summarize(GRID[::-1], lorentz_db(GRID, 7e9, 1e9))
    with pytest.raises(EbgError, match="one value per frequency"):
        summarize(GRID, curve[:10])
    with pytest.raises(EbgError, match="threshold_db"):
        summarize(GRID, lorentz_db(GRID, 7e9, 1e9), float("nan"))
    assert db20(np.array([0.0]))[0] == DB_FLOOR


def common_mode_notch_network(f0: float = 8e9, start_ghz: float = 2.0, stop_ghz: float = 14.0, points: int = 241):
    """A synthetic 4-port in the project's port order that notches only the common mode: mixed-mode blocks
    (differential: a matched 50 ohm line; common: a shunt series-LC resonator) turned into single-ended terms
    by scikit-rf's gmm2se."""
    freq = skrf.Frequency(start_ghz, stop_ghz, points, "GHz")
    line = skrf.media.DefinedGammaZ0(freq, z0=100.0, gamma=1j * 2 * np.pi * freq.f * 2 / 299_792_458.0)
    diff = line.line(8, "mm")
    cm_media = skrf.media.DefinedGammaZ0(freq, z0=25.0)
    L = 1.5e-9
    C = 1 / ((2 * np.pi * f0) ** 2 * L)
    comm = cm_media.shunt(cm_media.inductor(L) ** cm_media.capacitor(C) ** cm_media.resistor(0.2)
                          ** cm_media.short())
    s = np.zeros((freq.npoints, 4, 4), dtype=complex)
    s[:, 0:2, 0:2] = diff.s
    s[:, 2:4, 2:4] = comm.s
    network = skrf.Network(frequency=freq, s=s, z0=[100.0, 100.0, 25.0, 25.0])
    network.port_modes = np.array(["D", "D", "C", "C"])
    network.gmm2se(p=2, z0_se=50.0)
    return network, diff, comm


def test_response_json_of_a_common_mode_notch_is_stable_and_complete():
    from ebglayout.sparams import mixed_mode

    network, diff, comm = common_mode_notch_network()
    mm = mixed_mode(network)
    np.testing.assert_allclose(mm.scc21, comm.s[:, 1, 0], atol=1e-12)  # scikit-rf round trip
    np.testing.assert_allclose(mm.sdd21, diff.s[:, 1, 0], atol=1e-12)
    data = response_json(mm, source="model: test resonator", target_hz=8e9, extra={"corner": "nominal"})
    text = response_json_text(data)
    assert text == response_json_text(response_json(mm, source="model: test resonator", target_hz=8e9,
                                                     extra={"corner": "nominal"}))
    assert list(data)[:5] == ["source", "port_order", "target_hz", "threshold_db", "scc21"]
    assert list(data)[-4:] == ["corner", "freq_hz", "scc21_db", "sdd21_db"]
    loaded = json.loads(text)
    assert loaded["scc21"]["notch_hz"] == pytest.approx(8e9, abs=25e6)
    assert loaded["scc21"]["depth_db"] < -20
    assert loaded["target_in_stopband"] is True
    assert abs(loaded["sdd21_at_notch_db"]) < 1e-6 and loaded["sdc21_worst_db"] <= DB_FLOOR + 1e-9
    assert "compliance rests on" in loaded["caution"]
    assert len(loaded["freq_hz"]) == len(loaded["scc21_db"]) == 241
    again = summarize(loaded["freq_hz"], loaded["scc21_db"]).as_json()  # a reader of the file gets the summary
    assert again["depth_db"] == loaded["scc21"]["depth_db"]
    assert again["notch_hz"] == pytest.approx(loaded["scc21"]["notch_hz"], abs=1e3)  # 1e-4 dB rounding
    np.testing.assert_allclose(again["stopband_hz"], loaded["scc21"]["stopband_hz"], atol=1e3)  # 1e-4 dB rounding
    lines = format_response(loaded).splitlines()
    assert lines[0] == "source: model: test resonator"
    assert lines[1].startswith("Scc21 notch 8 GHz, depth ") and lines[-1].startswith("caution: ")
    with pytest.raises(EbgError, match="extra key 'scc21'"):
        response_json(mm, source="model", target_hz=None, extra={"scc21": 1})


def test_curve_summary_json_keys():
    s = CurveSummary(7.4e9, -23.456789, (7.0e9, 7.9e9), -10.0)
    assert s.as_json() == {"notch_hz": 7.4e9, "depth_db": -23.4568, "stopband_hz": [7.0e9, 7.9e9],
                           "threshold_db": -10.0, "notch_at_grid_edge": False,
                           "stopband_clipped": [False, False]}
    assert s.stopband_width_hz == pytest.approx(0.9e9)
