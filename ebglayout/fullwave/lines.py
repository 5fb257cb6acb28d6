"""Closed-form characteristic impedances of the lead-in lines: port impedances and the plain-line tests.

Microstrip: E. Hammerstad and O. Jensen, "Accurate models for microstrip computer-aided design", IEEE MTT-S
International Microwave Symposium Digest, 1980, eqs. for Z01(u), a(u), b(er) and eps_eff (zero strip thickness,
quasi-static; stated accuracy better than 0.2 % for 0.01 <= u <= 100, er < 128).
Stripline: S. B. Cohn, "Characteristic impedance of the shielded-strip transmission line", IRE Trans. MTT, 1954:
Z0 = eta0 / (4 sqrt(er)) K(k) / K(k'), k = sech(pi w / 2b), for a zero-thickness strip centred between planes b
apart (exact conformal map).
"""
from __future__ import annotations

import math

ETA0 = 376.730313668


def microstrip_eps_eff(w: float, h: float, er: float) -> float:
    """Hammerstad-Jensen effective permittivity of a zero-thickness microstrip of width w over height h."""
    u = w / h
    a = 1 + math.log((u**4 + (u / 52) ** 2) / (u**4 + 0.432)) / 49 + math.log(1 + (u / 18.1) ** 3) / 18.7
    b = 0.564 * ((er - 0.9) / (er + 3)) ** 0.053
    return (er + 1) / 2 + (er - 1) / 2 * (1 + 10 / u) ** (-a * b)


def microstrip_z0(w: float, h: float, er: float) -> float:
    """Hammerstad-Jensen characteristic impedance (ohm) of a zero-thickness microstrip."""
    u = w / h
    f = 6 + (2 * math.pi - 6) * math.exp(-((30.666 / u) ** 0.7528))
    z01 = ETA0 / (2 * math.pi) * math.log(f / u + math.sqrt(1 + (2 / u) ** 2))
    return z01 / math.sqrt(microstrip_eps_eff(w, h, er))


def stripline_z0(w: float, b: float, er: float) -> float:
    """Cohn's exact characteristic impedance (ohm) of a zero-thickness strip centred between planes b apart."""
    from scipy.special import ellipk

    k = 1 / math.cosh(math.pi * w / (2 * b))
    return ETA0 / (4 * math.sqrt(er)) * float(ellipk(k * k) / ellipk(1 - k * k))
