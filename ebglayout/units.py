"""Length and frequency parsing at the edges; mm and Hz everywhere inside."""
from __future__ import annotations

import math
import re

from .errors import SpecError

LENGTH_UNITS_MM = {"mm": 1.0, "um": 1e-3, "mil": 0.0254, "thou": 0.0254, "in": 25.4, "cm": 10.0, "nm": 1e-6}
FREQUENCY_UNITS_HZ = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9, "thz": 1e12}
RATE_UNITS_BPS = {"bps": 1.0, "kbps": 1e3, "mbps": 1e6, "gbps": 1e9, "tbps": 1e12, "gt/s": 1e9, "mt/s": 1e6}

GRID_MM = 1e-6
"""Every coordinate the engine emits lies on this 1 nm grid."""

_NUMBER_WITH_UNIT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([A-Za-z/]*)\s*$")


def round_hz(value: float, decimals: int = -3) -> float:
    """A frequency as reports store it: rounded to 1 kHz (estimates), or to 1 Hz with ``decimals=0`` (responses)."""
    return float(round(value, decimals))


def snap(value: float) -> float:
    """Round a length in mm to the 1 nm grid (idempotent)."""
    return round(value / GRID_MM) * GRID_MM if value else 0.0


def on_grid(geometry):
    """Snap a shapely geometry to the 1 nm grid and return it without an attached precision model.

    Later operations (buffers, probes) must run in full floating precision; a
    grid carried on the geometry would silently round their results.  A valid
    geometry whose vertices already sit on the grid (to float noise) only has
    its coordinates rounded, as GEOS rounds them (x * 1e6 rounded, / 1e6); any
    other goes through GEOS's snap-rounding, which keeps the result valid.
    """
    import numpy as np
    import shapely

    coords = shapely.get_coordinates(geometry)
    steps = coords * _PER_MM
    rounded = np.rint(steps)
    if len(coords) and float(np.abs(steps - rounded).max()) < 1e-3 and shapely.is_valid(geometry):
        return shapely.set_coordinates(shapely.from_wkb(shapely.to_wkb(geometry)), rounded / _PER_MM)
    return shapely.from_wkb(shapely.to_wkb(shapely.set_precision(geometry, GRID_MM)))


_PER_MM = 1e6
"""Grid steps per mm (1 / GRID_MM, exact), the scale GEOS's fixed precision model rounds with."""


def parse_length(value: object, key: str, file_units: str = "mm") -> float:
    """Return a length in mm from a bare number (in ``file_units``) or a string like "6mil"."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise SpecError(key, value, "must be a length: a number or a string such as \"0.15mm\" or \"6mil\"")
    if isinstance(value, str):
        match = _NUMBER_WITH_UNIT.match(value)
        if not match:
            raise SpecError(key, value, f"must be a number with a length unit ({', '.join(LENGTH_UNITS_MM)})")
        number, unit = float(match.group(1)), (match.group(2) or file_units).lower()
        if unit not in LENGTH_UNITS_MM:
            raise SpecError(key, value, f"unknown length unit {unit!r}; allowed: {', '.join(LENGTH_UNITS_MM)}")
        mm = number * LENGTH_UNITS_MM[unit]
    else:
        mm = float(value) * LENGTH_UNITS_MM[file_units]
    if not math.isfinite(mm):
        raise SpecError(key, value, "must be a finite length")
    return mm


def parse_frequency(value: object, key: str) -> float:
    """Return a frequency in Hz from "8GHz", "8 GHz", a bare number in Hz, or a data rate.

    A data rate ("16Gbps") gives the frequency of the NRZ second harmonic of the
    fundamental, which sits at the bit rate in Hz (common practice: an NRZ
    stream of rate R has its fundamental at R/2).
    """
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise SpecError(key, value, "must be a frequency such as \"8GHz\" or a data rate such as \"16Gbps\"")
    if isinstance(value, str):
        match = _NUMBER_WITH_UNIT.match(value)
        unit = match.group(2).lower() if match else ""
        if not match or not (unit in FREQUENCY_UNITS_HZ or unit in RATE_UNITS_BPS):
            raise SpecError(key, value,
                            "must be a frequency (Hz, kHz, MHz, GHz, THz) or a data rate (Mbps, Gbps, Tbps, GT/s)")
        number = float(match.group(1))
        hz = number * (FREQUENCY_UNITS_HZ.get(unit) or RATE_UNITS_BPS[unit])
    else:
        hz = float(value)
    if not math.isfinite(hz) or hz <= 0 or hz > 1e12:
        raise SpecError(key, value, "must be a frequency above 0 and at most 1 THz")
    return hz


def format_mm(value: float) -> str:
    """Short text for a length in mm: 0.15 -> "0.15 mm"."""
    return f"{value:.6g} mm"


def in_units(mm: float, units: str) -> float:
    """A length in mm expressed in ``units`` (one of LENGTH_UNITS_MM)."""
    return mm / LENGTH_UNITS_MM[units]


def format_length(mm: float, units: str = "mm", digits: int = 4, power: int = 1, sign: bool = False) -> str:
    """A length (``power`` 2: an area in mm2) for people, in the user's units with the unit written:
    0.1524 mm in "mil" -> "6 mil"."""
    value = mm / LENGTH_UNITS_MM[units] ** power
    return f"{value:{'+' if sign else ''}.{digits}g} {units}{'2' if power == 2 else ''}"


def spec_number(mm: float, units: str) -> str:
    """A length as a bare TOML number in a spec whose ``units`` are given, exact to the 1 nm grid when read back."""
    return f"{in_units(snap(mm), units):.12g}"


def format_hz(value: float) -> str:
    """Short text for a frequency: 7.95e9 -> "7.95 GHz"."""
    for unit, scale in (("GHz", 1e9), ("MHz", 1e6), ("kHz", 1e3)):
        if abs(value) >= scale:
            return f"{value / scale:.4g} {unit}"
    return f"{value:.4g} Hz"
