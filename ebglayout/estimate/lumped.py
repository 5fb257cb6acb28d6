"""Lumped LC model of a bridged (miniaturised) cell.

Well below its first cavity mode the patch is electrically small: it acts as
one capacitor to the plane below, and the narrow bridges that tie it to the
surrounding plane act as inductors.  The cell then resonates at
f = 1 / (2 pi sqrt(L C)) (the lumped parallel LC resonance; Pozar, Microwave
Engineering, 4th ed., sec. 6.1), and that resonance is the notch the bridges
pull below the cavity mode.

Left out, and said so in the docs: the patch's own spreading inductance and the
return path through the planes, mutual inductance between bridges, and the
bridges' height over the plane below (the ribbon formula is for a free strip).
"""
from __future__ import annotations

import math
from typing import Sequence

import numpy as np
from shapely.geometry import Polygon

from ..errors import EbgError
from ..errors import check_positive as _positive
from ..physics import EPS0

MU0_OVER_2PI = 2e-7
"""mu0 / (2 pi) in H/m (the classical value 4 pi 1e-7 H/m; the SI 2019 change is below 1e-9)."""
COPPER_1OZ_MM = 0.035
"""Thickness of 1 oz/ft^2 copper foil, mm (common practice)."""


def plate_capacitance(area_mm2: float, h_mm: float, er: float) -> float:
    """Capacitance (F) of a patch of ``area_mm2`` at ``h_mm`` over a plane, dielectric ``er``: C = e0 er A / h.

    The plain parallel plate without edge fringing, which puts the LC estimate slightly high.
    """
    _positive(area_mm2=area_mm2, h_mm=h_mm, er=er)
    return EPS0 * er * (area_mm2 * 1e-6) / (h_mm * 1e-3)


def strip_inductance(length_mm: float, width_mm: float, thickness_mm: float = COPPER_1OZ_MM) -> float:
    """Self-inductance (H) of a straight flat strip (ribbon) of rectangular section.

    L = 2e-7 l [ln(2 l / (w + t)) + 0.5 + 0.2235 (w + t) / l] H, l in m: the
    straight rectangular bar of E. B. Rosa (Bull. Bureau of Standards, 1908) and
    F. W. Grover, Inductance Calculations (1946), where 0.2235 (w + t) is the
    geometric mean distance of the section from itself (form of the last term
    from memory).  Low-frequency (uniform current) value, meant for l >~ w + t.
    """
    _positive(length_mm=length_mm, width_mm=width_mm, thickness_mm=thickness_mm)
    l, s = length_mm * 1e-3, (width_mm + thickness_mm) * 1e-3
    return MU0_OVER_2PI * l * (math.log(2 * l / s) + 0.5 + 0.2235 * s / l)


def parallel_inductance(values: Sequence[float]) -> float:
    """Inductors in parallel, 1 / L = sum(1 / L_i), with no mutual coupling between them."""
    if not values:
        raise EbgError("bridges: at least one bridge is needed for the LC model")
    return 1.0 / sum(1.0 / v for v in values)


def bridge_width(bridge: Polygon, bridge_length: float) -> float:
    """Width (mm) of a drawn bridge: the side of its minimum rotated rectangle that is not its length.

    Normally the narrow side; for a bridge shorter than it is wide, the side
    farther from the given length.
    """
    xy = np.asarray(bridge.minimum_rotated_rectangle.exterior.coords)[:3]
    s1, s2 = sorted(float(np.hypot(*(xy[i + 1] - xy[i]))) for i in range(2))
    return s1 if abs(s2 - bridge_length) <= abs(s1 - bridge_length) else s2


def cell_inductance(bridges: Sequence[Polygon], bridge_length: float) -> float:
    """Inductance (H) of a cell's bridges (1 oz copper) in parallel (mutual coupling ignored)."""
    return parallel_inductance([strip_inductance(bridge_length, bridge_width(b, bridge_length)) for b in bridges])


def lc_frequency(l_h: float, c_f: float) -> float:
    """f = 1 / (2 pi sqrt(L C)) in Hz (lumped LC resonance)."""
    return 1.0 / (2 * math.pi * math.sqrt(l_h * c_f))


def lc_notch(patch_polygon: Polygon, bridges: Sequence[Polygon], h: float, er: float, bridge_length: float) -> float:
    """LC resonance (Hz) of a bridged cell: C from the drawn patch area, L from its bridges in parallel."""
    _positive(h=h, er=er, bridge_length=bridge_length)
    return lc_frequency(cell_inductance(bridges, bridge_length), plate_capacitance(patch_polygon.area, h, er))

