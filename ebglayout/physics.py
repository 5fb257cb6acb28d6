"""Physical constants and the first cavity mode: the one home every model, check and sizing step reads them from.

SI values: ``C0`` is exact by the definition of the metre; ``MU0`` and ``EPS0`` are the CODATA 2018 recommended
values (NIST, "CODATA Recommended Values of the Fundamental Physical Constants: 2018").
"""
from __future__ import annotations

import math

C0 = 299_792_458.0
"""Speed of light in vacuum, m/s."""
MU0 = 1.25663706212e-6
"""Vacuum permeability, H/m."""
EPS0 = 8.8541878128e-12
"""Vacuum permittivity, F/m."""


def tm10_hz(length_mm: float, er: float) -> float:
    """First mode of a parallel-plate cavity with open (magnetic-wall) edges, ``length_mm`` long: c / (2 a sqrt(er)).

    Half a wavelength in the dielectric across the cavity's length (the TM10 mode of the cavity model; e.g.
    Balanis, Antenna Theory, 3rd ed., sec. 14.2.2, from memory).
    """
    return C0 / (2 * length_mm * 1e-3 * math.sqrt(er))


def tm10_length_mm(f_hz: float, er: float) -> float:
    """The cavity length whose TM10 mode is at ``f_hz``: the inverse of ``tm10_hz``."""
    return C0 / (2 * f_hz * math.sqrt(er)) * 1e3
