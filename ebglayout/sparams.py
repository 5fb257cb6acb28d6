"""4-port S-parameters of a filtered pair: mixed-mode conversion and Touchstone writing, both through scikit-rf.

Every 4-port the project makes (full-wave run or fast model) uses one single-ended port order:

    port 1 = P trace near end (path start)   port 3 = P trace far end (path end)
    port 2 = N trace near end                port 4 = N trace far end

scikit-rf's ``Network.se2gmm(p=2)`` pairs single-ended ports (0, 1) into mixed-mode port 1 and (2, 3) into
mixed-mode port 2 (0-based indices; the first port of a pair is the positive one: Vd = V0 - V1,
Vc = (V0 + V1) / 2), and orders its result [D1, D2, C1, C2].  Our order already pairs the near ends and the far
ends with P first, so it goes to ``se2gmm`` unchanged and

    Sdd21 = S[D2, D1] = s[1, 0]   Scc21 = S[C2, C1] = s[3, 2]   Sdc21 = S[D2, C1] = s[1, 2]
    Sdd11 = s[0, 0]               Scc11 = s[2, 2]

(D-out, C-in for Sdc21: the differential wave at the far end caused by a common-mode wave at the near end).
For uncoupled single-ended ports of reference impedance Z0 the modes are referred to Zdiff = 2 Z0 and
Zcomm = Z0 / 2 (scikit-rf's default, the usual choice of the mixed-mode definitions).
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import EbgError

PORT_ORDER = ("P near end (path start)", "N near end (path start)", "P far end (path end)",
              "N far end (path end)")
"""Single-ended ports 1-4 of every 4-port the project makes."""
PORT_NAMES = ("P_near", "N_near", "P_far", "N_far")
TOUCHSTONE_DIGITS = 12
"""Significant digits after the point of each real and imaginary part written (%.12e): far below any solver's
noise, and the same bytes on every run."""


@dataclass(frozen=True, eq=False)
class MixedMode:
    """The mixed-mode terms the project reads from a 4-port, one complex value per frequency (Hz)."""

    freq_hz: np.ndarray
    scc21: np.ndarray
    sdd21: np.ndarray
    sdc21: np.ndarray
    scc11: np.ndarray
    sdd11: np.ndarray
    z0_diff_ohm: float | None = None
    """Differential-mode reference impedance (at the first frequency) the terms refer to."""
    z0_comm_ohm: float | None = None
    """Common-mode reference impedance (at the first frequency) the terms refer to."""


def mixed_mode(network, z0_diff_ohm: float | None = None, z0_comm_ohm: float | None = None) -> MixedMode:
    """Mixed-mode terms of a 4-port in the project's port order (see the module docstring), by scikit-rf.

    Given both mode impedances, the modes are referred to them (scikit-rf ``se2gmm`` with ``z0_mm``, an exact
    renormalisation); otherwise to 2 Z0 and Z0 / 2 of the single-ended ports."""
    nports = getattr(network, "nports", None)
    if nports != 4:
        raise EbgError(f"network ports = {nports}: mixed-mode terms need a 4-port (P/N near end, P/N far end)")
    mm = network.copy()
    if z0_diff_ohm is not None and z0_comm_ohm is not None:
        z0_mm = np.tile([z0_diff_ohm, z0_diff_ohm, z0_comm_ohm, z0_comm_ohm], (len(mm.f), 1)).astype(complex)
        mm.se2gmm(p=2, z0_mm=z0_mm)
    else:
        mm.se2gmm(p=2)
    s = mm.s
    return MixedMode(freq_hz=np.array(mm.f, dtype=float), scc21=s[:, 3, 2].copy(), sdd21=s[:, 1, 0].copy(),
                     sdc21=s[:, 1, 2].copy(), scc11=s[:, 2, 2].copy(), sdd11=s[:, 0, 0].copy(),
                     z0_diff_ohm=float(np.real(mm.z0[0, 0])), z0_comm_ohm=float(np.real(mm.z0[0, 2])))


def common_through(s: np.ndarray) -> np.ndarray:
    """Scc21 alone from single-ended S (F, 4, 4) in the project's port order, all ports of one real reference:
    (S31 + S32 + S41 + S42) / 2, the mixed-mode definition (D. E. Bockelman and W. R. Eisenstadt, IEEE T-MTT
    43(7), 1995; from memory) that ``mixed_mode`` gets from scikit-rf, referred to half the ports' reference
    (ports at 2 Zc give Scc21 at Zc).  For the tolerance corners, which need
    only this term: the full conversion costs far more than the model's solve."""
    s = np.asarray(s)
    return (s[:, 2, 0] + s[:, 2, 1] + s[:, 3, 0] + s[:, 3, 1]) / 2


def touchstone_text(network, comments: list[str], r_ref: float | None = None) -> str:
    """The network as Touchstone 1.0 text (.s4p for a 4-port): header comments first, then scikit-rf's writer
    in real/imaginary form at fixed precision, without its version line, so the bytes depend on the data only.

    The reference impedance must be one real value on every port (``r_ref`` renormalises to it first).
    """
    z0 = np.asarray(network.z0)
    if r_ref is None:
        if np.any(z0.imag != 0) or not np.all(z0 == z0.flat[0]):
            raise EbgError("network reference impedance: differs between ports or is complex; pass r_ref to "
                           "renormalise to one real value")
        r_ref = float(z0.flat[0].real)
    if not (np.isfinite(r_ref) and r_ref > 0):
        raise EbgError(f"r_ref = {r_ref!r}: must be a finite number of ohms > 0")
    if not np.all(np.isfinite(network.s)):
        raise EbgError("network S-parameters: contain NaN or infinite values; nothing written")
    ntwk = network.copy()
    ntwk.renormalize(r_ref)
    ntwk.frequency.unit = "Hz"
    ntwk.comments = ""
    if ntwk.nports == 4:
        ntwk.port_names = list(PORT_NAMES)
    header = [f"ebglayout {ntwk.nports}-port S-parameters, real/imaginary, frequency in Hz"]
    if ntwk.nports == 4:
        header.append("port order: " + ", ".join(f"{k} = {name}" for k, name in enumerate(PORT_ORDER, start=1)))
    header.append(f"reference impedance: {r_ref:g} ohm on every port")
    lines = "".join(f"! {line}\n" for line in header + [c for text in comments for c in str(text).splitlines()])
    fmt = f"{{:.{TOUCHSTONE_DIGITS}e}}"
    body = ntwk.write_touchstone("network", return_string=True, skrf_comment=False, form="ri", format_spec_A=fmt,
                                 format_spec_B=fmt, format_spec_freq="{:.3f}", r_ref=r_ref)
    return lines + body


def write_touchstone(network, path: str | Path, comments: list[str], r_ref: float | None = None) -> Path:
    """Write ``touchstone_text`` to ``path`` atomically (nothing is left behind on an error); return the path.

    ``comments`` should say where the data came from (solver and preset, or model); the header always states the
    port order and the reference impedance.  No timestamps: the same network gives the same bytes.
    """
    from .export import atomic_path

    text = touchstone_text(network, comments, r_ref)
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_bytes(text.encode("ascii", errors="replace"))
    return path
