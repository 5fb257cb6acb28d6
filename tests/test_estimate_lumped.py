"""Lumped LC model: plate C and strip L against hand arithmetic and an independent numerical integral.

References outside ebglayout:
- C = e0 er A / h, the parallel-plate capacitor (any electromagnetics text), hand-computed;
- the flat-bar inductance of Rosa / Grover, hand-computed, and checked against the partial
  self-inductance of the bar as the mean mutual inductance of its current filaments, with
  the exact mutual inductance of two parallel filaments of equal length l at distance d,
  M = 2e-7 l [ln(l/d + sqrt(1 + l^2/d^2)) - sqrt(1 + d^2/l^2) + d/l]
  (F. W. Grover, Inductance Calculations, 1946; from memory), integrated with Gauss-Legendre
  rules of different orders so no filament pair coincides.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from shapely import affinity
from shapely.geometry import box

from ebglayout.errors import EbgError
from ebglayout.estimate.lumped import EPS0, bridge_width, lc_notch, plate_capacitance, strip_inductance


def test_plate_capacitance_hand_computed():
    # hand-computed from the formula: 8.8541878128e-12 * 4 * 10e-6 / 0.1e-3 = 3.54167513e-12 F
    assert plate_capacitance(10.0, 0.1, 4.0) == pytest.approx(3.54167513e-12, rel=1e-8)
    assert plate_capacitance(10.0, 0.2, 4.0) == pytest.approx(3.54167513e-12 / 2, rel=1e-8)


def test_strip_inductance_hand_computed():
    # hand-computed from the formula: l = 1 mm, w + t = 0.235 mm:
    # 2e-7 * 1e-3 * (ln(2 / 0.235) + 0.5 + 0.2235 * 0.235) = 2e-10 * 2.693839 = 5.387679e-10 H
    assert strip_inductance(1.0, 0.2, 0.035) == pytest.approx(5.387679e-10, rel=1e-6)
    assert strip_inductance(1.0, 0.2) == strip_inductance(1.0, 0.2, 0.035)


def _filament_mutual(l: float, d: np.ndarray) -> np.ndarray:
    q = l / d
    return 2e-7 * l * (np.log(q + np.sqrt(1 + q * q)) - np.sqrt(1 + 1 / (q * q)) + 1 / q)


def _bar_by_filaments(l_mm: float, w_mm: float, t_mm: float, order: int = 40) -> float:
    """Mean mutual inductance over all filament pairs of a w x t section (uniform current), H."""
    l, w, t = l_mm * 1e-3, w_mm * 1e-3, t_mm * 1e-3

    def section(n: int):
        x, wt = np.polynomial.legendre.leggauss(n)
        u, v = (x + 1) / 2 * w, (x + 1) / 2 * t
        pts = np.stack(np.meshgrid(u, v, indexing="ij"), -1).reshape(-1, 2)
        return pts, np.outer(wt / 2, wt / 2).ravel()

    a, aw = section(order)
    b, bw = section(order + 1)
    d = np.hypot(a[:, None, 0] - b[None, :, 0], a[:, None, 1] - b[None, :, 1])
    return float(np.sum(aw[:, None] * bw[None, :] * _filament_mutual(l, d)))


@pytest.mark.parametrize("l, w, t", [(0.6, 0.12, 0.035), (1.0, 0.2, 0.035), (5.0, 0.1, 0.035), (2.0, 0.5, 0.018)])
def test_strip_inductance_against_filament_integral(l, w, t):
    assert strip_inductance(l, w, t) == pytest.approx(_bar_by_filaments(l, w, t), rel=0.01)


def _rotated(poly, angle):
    return shapely.set_precision(affinity.rotate(poly, angle, origin=(0, 0)), 1e-6)


@pytest.mark.parametrize("angle", [0.0, 30.0, 90.0, 201.0])
def test_bridge_width_is_the_side_that_is_not_the_length(angle):
    assert bridge_width(_rotated(box(0, 0, 0.12, 0.6), angle), 0.6) == pytest.approx(0.12, abs=2e-6)
    # a stubby bridge, wider than long: the width is the long side
    assert bridge_width(_rotated(box(0, 0, 0.5, 0.15), angle), 0.15) == pytest.approx(0.5, abs=2e-6)


def test_lc_notch_from_hand_computed_l_and_c():
    """Patch 3 x 3 mm with two 0.6 mm x 0.12 mm bridges in parallel (no mutual coupling)."""
    patch = _rotated(box(-1.5, -1.5, 1.5, 1.5), 30.0)
    bridges = [_rotated(box(-0.06, 1.5 - 0.45, 0.06, 1.65), 30.0), _rotated(box(-0.06, -1.65, 0.06, -1.05), 30.0)]
    # hand-computed from the formulas: C = e0 * 4.1 * 9e-6 / 1e-4 = 3.2671953e-12 F;
    # L1 = 2e-7 * 0.6e-3 * (ln(1.2 / 0.155) + 0.5 + 0.2235 * 0.155 / 0.6) = 3.1252671e-10 H, L = L1 / 2
    c = EPS0 * 4.1 * 9e-6 / 1e-4
    assert c == pytest.approx(3.2671953e-12, rel=1e-7)
    l_half = 3.1252671e-10 / 2
    expected = 1 / (2 * math.pi * math.sqrt(l_half * c))
    got = lc_notch(patch, bridges, 0.1, 4.1, 0.6)
    assert got == pytest.approx(expected, rel=1e-5)
    # one bridge alone: L doubles, f drops by sqrt(2)
    assert lc_notch(patch, bridges[:1], 0.1, 4.1, 0.6) == pytest.approx(got / math.sqrt(2), rel=1e-9)
    # f scales as sqrt(h / er) (C proportional to er / h, L independent of both)
    assert lc_notch(patch, bridges, 0.11, 4.1 * 0.95, 0.6) == pytest.approx(got * math.sqrt(1.1 / 0.95), rel=1e-9)


@pytest.mark.parametrize("call", [
    lambda: plate_capacitance(0.0, 0.1, 4.0),
    lambda: plate_capacitance(1.0, -0.1, 4.0),
    lambda: strip_inductance(0.6, 0.0),
    lambda: lc_notch(box(0, 0, 3, 3), [], 0.1, 4.1, 0.6),
    lambda: lc_notch(box(0, 0, 3, 3), [box(0, 0, 0.1, 0.6)], 0.1, 4.1, float("inf")),
])
def test_bad_input_raises(call):
    with pytest.raises(EbgError):
        call()
