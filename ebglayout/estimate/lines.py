"""The differential pair as coupled lines: even (common) and odd (differential) mode impedance, delay and loss.

Quasi-static closed forms, zero-thickness strips, no dispersion:

- single microstrip: E. Hammerstad and O. Jensen, "Accurate models for microstrip computer-aided design",
  IEEE MTT-S Int. Microwave Symp. Digest, 1980 (Z0 eq. with f(u) = 6 + (2 pi - 6) exp(-(30.666/u)^0.7528) and
  the effective permittivity with exponents a(u), b(er)); forms from memory;
- coupled microstrip: M. Kirschning and R. H. Jansen, "Accurate wide-range design equations for the
  frequency-dependent characteristic of parallel coupled microstrip lines", IEEE Trans. MTT 32(1), 1984, and its
  correction (MTT 33(3), 1985): the static even/odd effective permittivities and impedances (Q1..Q10); forms
  from memory;
- coupled stripline, strips centred between two planes: S. B. Cohn, "Shielded coupled-strip transmission line",
  IRE Trans. MTT 3(5), 1955: Z0e,o = 30 pi / sqrt(er) K(k') / K(k) with k_e = tanh(pi W / 2b) tanh(pi (W + S) / 2b)
  and k_o = tanh(pi W / 2b) coth(pi (W + S) / 2b) (exact conformal map for zero thickness).  A pair nearer one
  plane is treated as centred in the same total height (stated approximation).

Loss: dielectric attenuation alpha_d = k0 er (eeff - 1) tan d / (2 sqrt(eeff) (er - 1)) for microstrip and
k0 sqrt(er) tan d / 2 for stripline (D. M. Pozar, Microwave Engineering, 4th ed., eqs. 3.198 and 3.30; numbers from
memory), and conductor attenuation alpha_c = Rs / (Z0m W) per strip, Rs = sqrt(omega mu0 / 2 sigma) of copper
(the wide-strip estimate; the return plane's share and surface roughness are left out).
The common mode's impedance is Z0e / 2, the differential mode's 2 Z0o.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import EbgError
from ..errors import check_positive as _check
from ..physics import C0, MU0
from ..stackup import Stackup

ETA0 = 376.730313668
"""Impedance of free space, ohm (CODATA 2018)."""
COPPER_S_PER_M = 5.8e7
"""Conductivity of annealed copper, S/m (common practice)."""


@dataclass(frozen=True)
class Mode:
    """One propagating mode of the pair: characteristic impedance (per strip, ohm) and effective permittivity."""

    z0: float
    eeff: float


@dataclass(frozen=True)
class CoupledLines:
    """Even and odd modes of the pair over its reference, and what sets their loss."""

    even: Mode
    odd: Mode
    er: float
    tan_d: float
    width_mm: float
    stripline: bool
    copper_s_per_m: float | None = COPPER_S_PER_M
    """Conductivity of the strips; None for perfect conductors (a full-wave run with lossless copper)."""

    @property
    def z_common(self) -> float:
        return self.even.z0 / 2

    @property
    def z_differential(self) -> float:
        return 2 * self.odd.z0

    def gamma(self, freq_hz: np.ndarray, mode: str) -> np.ndarray:
        """Propagation constant alpha + j beta (1/m) of the "even" or "odd" mode at ``freq_hz``."""
        m = self.even if mode == "even" else self.odd
        f = np.asarray(freq_hz, dtype=float)
        k0 = 2 * np.pi * f / C0
        beta = k0 * math.sqrt(m.eeff)
        if self.stripline:
            alpha_d = k0 * math.sqrt(self.er) * self.tan_d / 2
        else:
            alpha_d = k0 * self.er * (m.eeff - 1) * self.tan_d / (2 * math.sqrt(m.eeff) * (self.er - 1)) \
                if self.er > 1 else k0 * 0.0
        if self.copper_s_per_m is None:
            return alpha_d + 1j * beta
        rs = np.sqrt(2 * np.pi * f * MU0 / (2 * self.copper_s_per_m))
        alpha_c = rs / (m.z0 * self.width_mm * 1e-3)
        return alpha_d + alpha_c + 1j * beta


def microstrip_single(w_over_h: float, er: float) -> Mode:
    """Hammerstad and Jensen (1980): Z0 and eeff of one zero-thickness microstrip."""
    _check(w_over_h=w_over_h, er=er)
    u = w_over_h
    fu = 6 + (2 * math.pi - 6) * math.exp(-((30.666 / u) ** 0.7528))
    z01 = ETA0 / (2 * math.pi) * math.log(fu / u + math.sqrt(1 + (2 / u) ** 2))
    eeff = _eeff_hj(u, er)
    return Mode(z01 / math.sqrt(eeff), eeff)


def _eeff_hj(u: float, er: float) -> float:
    a = 1 + math.log((u ** 4 + (u / 52) ** 2) / (u ** 4 + 0.432)) / 49 + math.log(1 + (u / 18.1) ** 3) / 18.7
    b = 0.564 * ((er - 0.9) / (er + 3)) ** 0.053
    return (er + 1) / 2 + (er - 1) / 2 * (1 + 10 / u) ** (-a * b)


def microstrip_coupled(w_over_h: float, s_over_h: float, er: float) -> tuple[Mode, Mode]:
    """Kirschning and Jansen (1984): static (even, odd) modes of two equal zero-thickness microstrips."""
    _check(w_over_h=w_over_h, s_over_h=s_over_h, er=er)
    u, g = w_over_h, s_over_h
    single = microstrip_single(u, er)
    e0, z0 = single.eeff, single.z0
    v = u * (20 + g * g) / (10 + g * g) + g * math.exp(-g)
    e_even = _eeff_hj(v, er)
    a_o = 0.7287 * (e0 - (er + 1) / 2) * (1 - math.exp(-0.179 * u))
    b_o = 0.747 * er / (0.15 + er)
    c_o = b_o - (b_o - 0.207) * math.exp(-0.414 * u)
    d_o = 0.593 + 0.694 * math.exp(-0.562 * u)
    e_odd = ((er + 1) / 2 + a_o - e0) * math.exp(-c_o * g ** d_o) + e0
    q1 = 0.8695 * u ** 0.194
    q2 = 1 + 0.7519 * g + 0.189 * g ** 2.31
    q3 = 0.1975 + (16.6 + (8.4 / g) ** 6) ** -0.387 + math.log(g ** 10 / (1 + (g / 3.4) ** 10)) / 241
    q4 = 2 * q1 / q2 / (math.exp(-g) * u ** q3 + (2 - math.exp(-g)) * u ** -q3)
    q5 = 1.794 + 1.14 * math.log(1 + 0.638 / (g + 0.517 * g ** 2.43))
    q6 = 0.2305 + math.log(g ** 10 / (1 + (g / 5.8) ** 10)) / 281.3 + math.log(1 + 0.598 * g ** 1.154) / 5.1
    q7 = (10 + 190 * g * g) / (1 + 82.3 * g ** 3)
    q8 = math.exp(-6.5 - 0.95 * math.log(g) - (g / 0.15) ** 5)
    q9 = math.log(q7) * (q8 + 1 / 16.5)
    q10 = q4 - q5 / q2 * math.exp(q6 * math.log(u) * u ** -q9)
    z_even = z0 * math.sqrt(e0 / e_even) / (1 - z0 / ETA0 * math.sqrt(e0) * q4)
    z_odd = z0 * math.sqrt(e0 / e_odd) / (1 - z0 / ETA0 * math.sqrt(e0) * q10)
    return Mode(z_even, e_even), Mode(z_odd, e_odd)


def stripline_coupled(w_mm: float, s_mm: float, b_mm: float, er: float) -> tuple[Mode, Mode]:
    """Cohn (1955): (even, odd) modes of two zero-thickness strips centred between planes ``b_mm`` apart."""
    _check(w_mm=w_mm, s_mm=s_mm, b_mm=b_mm, er=er)
    from scipy.special import ellipk

    t1 = math.tanh(math.pi * w_mm / (2 * b_mm))
    t2 = math.tanh(math.pi * (w_mm + s_mm) / (2 * b_mm))
    out = []
    for k in (t1 * t2, t1 / t2):
        ratio = float(ellipk(1 - k * k) / ellipk(k * k))
        out.append(Mode(30 * math.pi / math.sqrt(er) * ratio, er))
    return out[0], out[1]


def stripline_single(w_mm: float, b_mm: float, er: float) -> Mode:
    """Cohn (1954, "Characteristic impedance of the shielded-strip transmission line"): one centred strip,
    Z0 = 30 pi / sqrt(er) K(k) / K(k'), k = sech(pi W / 2b) (the coupled form's limit S -> infinity)."""
    _check(w_mm=w_mm, b_mm=b_mm, er=er)
    from scipy.special import ellipk

    k = 1 / math.cosh(math.pi * w_mm / (2 * b_mm))
    return Mode(30 * math.pi / math.sqrt(er) * float(ellipk(k * k) / ellipk(1 - k * k)), er)


def pair_lines(stackup: Stackup, width_mm: float, spacing_mm: float, copper: bool = True) -> CoupledLines:
    """The pair's coupled-line modes over its cut plane(s): microstrip for one plane, stripline for two;
    ``copper`` False makes the strips perfect conductors."""
    planes = stackup.planes
    er, tan_d = planes[0].pair.er, planes[0].pair.tan_d
    h = planes[0].pair.h + planes[1].pair.h if stackup.stripline else planes[0].pair.h
    try:
        if stackup.stripline:
            even, odd = stripline_coupled(width_mm, spacing_mm, h, er)
        else:
            even, odd = microstrip_coupled(width_mm / h, spacing_mm / h, er)
    except (OverflowError, ZeroDivisionError, ValueError):
        raise EbgError(f"pair.width = {width_mm:g} mm, pair.spacing = {spacing_mm:g} mm over "
                       f"{'both pair dielectrics' if stackup.stripline else 'stackup.pair_h'} = {h:g} mm: outside "
                       "the range the coupled-line formulas can evaluate; use proportions of a real pair "
                       "(width and spacing from about 0.01 to 100 times the height)") from None
    return CoupledLines(even, odd, er, tan_d, width_mm, stackup.stripline, COPPER_S_PER_M if copper else None)


def mode_reference_ohm(stackup: Stackup, width_mm: float, spacing_mm: float) -> tuple[float, float]:
    """(differential, common) reference impedances every mixed-mode result is stated at, model and full-wave
    alike: 2 Z0odd and Z0even / 2 of the pair's closed forms above, rounded to 1 mohm as the result files state
    them. A plain line then reads matched in both modes, so a dip in Scc21 is the filter's and not a mismatch's."""
    lines = pair_lines(stackup, width_mm, spacing_mm)
    return round(lines.z_differential, 3), round(lines.z_common, 3)
