"""Common-mode rejection of the drawn filter from the circuit model, nominal and over the tolerance corners.

The nominal 4-port (``network.filter_network``) gives Scc21 and Sdd21 and the same summary object as a full-wave
result (``response.response_json``).  The corners: every combination of er (all dielectrics) and the cavity and
pair heights at -+ their relative tolerances, and the etch at -+ its tolerance (over-etch widens the slots by
the tolerance, narrows the bridges by it and shrinks each patch by it in both directions; under-etch the
reverse), 16 in all.  Their notch centres give the notch spread; the frequencies that every corner rejects by
at least the threshold are the guaranteed stopband (``response.guaranteed_stopband``).
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, replace

import numpy as np

from ..errors import EbgError
from ..layout import Layout, build_layout
from ..response import corners_json, db20, response_json
from ..sparams import common_through, mixed_mode
from ..stackup import CutPlaneStack, Dielectric, Stackup
from .lines import mode_reference_ohm
from .network import SOURCE, filter_network

POINTS = 1001
"""Frequencies in the model's sweep: steps of 0.1 % of the span, about 0.08 % of the notch frequency."""
SPAN = (0.6, 1.4)
"""The sweep runs from 0.6 x the lowest to 1.4 x the highest of the reference frequencies (target and notches)."""
MODEL_CAUTION = ("Scc21 and Sdd21 from a circuit model (coupled lines, cavity modes), not a full-wave run: a "
                 "guide for placement and review; confirm with a full-wave run and a measurement")


@dataclass(frozen=True, eq=False)
class Rejection:
    """The model's nominal response and its tolerance corners on one frequency grid."""

    freq_hz: np.ndarray
    network: object
    corners: dict
    target_hz: float | None
    threshold_db: float
    margin: float
    tolerances: dict
    mode_reference_ohm: tuple[float, float] = (None, None)
    """(differential, common) impedances the mixed-mode terms are referred to (``lines.mode_reference_ohm``)."""

    def to_json(self) -> dict:
        """The result object (``response.response_json``) with the notch spread, the corners and their guaranteed
        stopband under ``tolerance`` (``response.corners_json``), and whether it covers the target with its
        margin."""
        corners = corners_json(self.freq_hz, self.corners, self.threshold_db)
        notches = [c["notch_hz"] for c in corners["corners"]]
        differential, common = self.mode_reference_ohm
        extra = {"model_caution": MODEL_CAUTION, "mode_reference_ohm": [differential, common],
                 "tolerances": self.tolerances,
                 "notch_spread_hz": [min(notches), max(notches)],
                 "target_margin": self.margin, "target_covered": self.target_covered(corners),
                 "tolerance": corners}
        return response_json(mixed_mode(self.network, *self.mode_reference_ohm), source=SOURCE, target_hz=self.target_hz,
                             threshold_db=self.threshold_db, extra=extra)

    def target_covered(self, corners: dict | None = None) -> bool | None:
        """True when one guaranteed band holds target x (1 -+ margin); None without a target."""
        if self.target_hz is None:
            return None
        corners = corners or corners_json(self.freq_hz, self.corners, self.threshold_db)
        low, high = self.target_hz * (1 - self.margin), self.target_hz * (1 + self.margin)
        return any(a <= low and high <= b for a, b in corners["guaranteed_stopband_hz"])


TARGET_REACH = 2.0
"""The sweep includes the target only within this factor of the cells' notches: a target farther off is missed
by any reading of the model, and sweeping out to it would solve the cavities at thousands of modes."""


def sweep(layout: Layout, target_hz: float | None, notches_hz: list[float], points: int = POINTS) -> np.ndarray:
    """The model's frequency grid around the cells' notches and the target (when within ``TARGET_REACH``)."""
    refs = [f for f in notches_hz if f]
    if target_hz and (not refs or min(refs) / TARGET_REACH <= target_hz <= TARGET_REACH * max(refs)):
        refs.append(target_hz)
    if not refs:
        raise EbgError("model sweep: needs a target or a notch estimate to centre on")
    return np.linspace(SPAN[0] * min(refs), SPAN[1] * max(refs), points)


def model_rejection(layout: Layout, freq_hz: np.ndarray, *, corners: bool = True, etch: bool = True) -> Rejection:
    """Nominal network and, with ``corners``, Scc21 at every tolerance corner (see the module docstring).

    ``etch`` False leaves the etch corners out (a layout whose copper came from a board cannot be re-etched from
    its spec); the tolerances then say etch 0.  The same spec, copper and sweep give the same object back (the
    last few are kept): building one filter's outputs, checks and report asks for it more than once.
    """
    freq = np.asarray(freq_hz, dtype=float)
    key = (layout.spec, _copper_key(layout), freq.tobytes(), corners, etch)
    if key not in _SOLVED:
        if len(_SOLVED) >= 8:
            _SOLVED.pop(next(iter(_SOLVED)))
        _SOLVED[key] = _solve(layout, freq, corners, etch)
    return _SOLVED[key]


_SOLVED: dict[tuple, Rejection] = {}


def _copper_key(layout: Layout) -> bytes:
    import shapely

    geoms = [g for cut in layout.cuts for g in (cut.slot, cut.patch, cut.bridge)]
    geoms += [t.centreline for t in layout.traces]
    return b"|".join(shapely.to_wkb(geoms, hex=False).tolist()) + repr([t.width for t in layout.traces]).encode()


def _solve(layout: Layout, freq_hz: np.ndarray, corners: bool, etch: bool) -> Rejection:
    spec = layout.spec
    reference = mode_reference_ohm(layout.stackup, spec.pair_width, spec.pair_spacing)
    nominal = filter_network(layout, freq_hz)
    curves = {"nominal": db20(mixed_mode(nominal, *reference).scc21)}
    etch = spec.etch_tolerance if etch else 0.0
    skipped = []
    if corners:
        variants = {0: layout}
        if etch > 0:
            variants = {sign: _etched(layout, sign * etch) for sign in (-1, 1)}
            skipped = [f"etch{'-+'[sign > 0]}" for sign, lay in variants.items() if lay is None]
        for (r_er, r_h, r_pair), (sign, lay) in itertools.product(itertools.product((-1, 1), repeat=3),
                                                                  variants.items()):
            if lay is None:
                continue
            stack = _scaled(lay.stackup, 1 + r_er * spec.er_tolerance, 1 + r_h * spec.h_tolerance,
                            1 + r_pair * spec.h_tolerance)
            label = f"er{'-+'[r_er > 0]} h{'-+'[r_h > 0]} pair_h{'-+'[r_pair > 0]}"
            label += f" etch{'-+'[sign > 0]}" if sign else ""
            single_ended = filter_network(lay, freq_hz, stackup=stack, z0_ohm=2 * reference[1])
            curves[label] = db20(common_through(single_ended.s))
    tolerances = {"er": spec.er_tolerance, "h": spec.h_tolerance, "pair_h": spec.h_tolerance, "etch_mm": etch,
                  "etch_corners_not_built": skipped}
    return Rejection(np.asarray(freq_hz, dtype=float), nominal, curves, spec.target_hz, spec.rejection_db,
                     spec.target_margin, tolerances, reference)


def _scaled(stack: Stackup, er: float, h: float, pair_h: float) -> Stackup:
    planes = tuple(CutPlaneStack(p.layer, Dielectric(p.pair.h * pair_h, p.pair.er * er, p.pair.tan_d),
                                 Dielectric(p.cavity.h * h, p.cavity.er * er, p.cavity.tan_d)) for p in stack.planes)
    return replace(stack, planes=planes)


def _etched(layout: Layout, over: float) -> Layout | None:
    """The layout re-built with the slots ``over`` mm wider, bridges and patches ``over`` mm narrower (negative:
    under-etched); None when that cannot be built (a neck the etch would close)."""
    spec = layout.spec
    patches = tuple((a - over, b - over) for a, b in spec.patches)
    bridge = spec.bridge_width - over if spec.bridge_width else spec.bridge_width
    try:
        return build_layout(replace(spec, slot=spec.slot + over, patches=patches, bridge_width=bridge))
    except EbgError:
        return None
