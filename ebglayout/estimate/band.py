"""Notch estimate of the as-drawn cut: per-cell resonances, their spread over the stack-up tolerances, and the
circuit model's common-mode rejection (``rejection``).

Each cell's patch, as placed in the layout, is a cavity over the next plane
(``cavity``); a bridged cell is also a lumped LC resonator (``lumped``).

Which resonance sets a bridged cell's notch: the lower of the LC resonance and
the lowest cavity mode.  The common-mode wave is stopped at the cell's first
resonance.  The bridges exist to pull that first resonance below the cavity
mode; while the LC resonance lies well below it the patch is electrically small
and the lumped model holds ("lc" governs).  When the bridges are too wide or
short for that, the LC estimate lands above the cavity mode, the lumped model
no longer describes the patch, and the first resonance is cavity-like
("cavity" governs).  Near the crossover the two interact and both numbers are
rough; ``format_table`` says so.

Which cavity mode: the common mode drives the patch symmetrically about the pair's centre line, so a mode odd
about it (TMmn with n odd, n counting half-waves across the pair) is not excited where the pair crosses the
patch's middle; a rectangle's notch is its lowest mode with n even.  Folded lanes cross off the centre and
excite every mode, so there the lowest mode counts.

The notch spread (not a stopband: these are resonance centres): every cell's notch at every corner of the
tolerance sweep er x (1 - t_er, 1, 1 + t_er) and h x (1 - t_h, 1, 1 + t_h).  A cavity mode
scales as 1 / sqrt(er) and does not depend on h; the LC resonance, with
C proportional to er / h and the bridge inductance independent of both, scales
as sqrt(h / er).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
import shapely
from shapely import affinity
from shapely.geometry import Polygon

from .. import CAUTION as COMPLIANCE_CAUTION
from ..layout import Layout, PlacedCell
from ..units import GRID_MM, format_hz, format_length, round_hz
from .cavity import polygon_modes, rect_modes
from .lumped import lc_notch

CAUTION = f"estimate for placement and review, not a substitute for a field solve or measurement; {COMPLIANCE_CAUTION}"
INTERACTION = 0.3
"""Relative distance between the LC and cavity resonances below which the two are said to interact."""


@dataclass(frozen=True)
class Mode:
    """One cavity resonance: frequency, how it was found, and a label (TMmn for the closed form)."""

    f_hz: float
    method: str
    label: str


@dataclass(frozen=True)
class CellEstimate:
    """Resonances and notch of one placed cell (nominal er and h)."""

    index: int
    modes: tuple[Mode, ...]
    lc_f_hz: float | None
    notch_hz: float
    governs: str
    notch_label: str = ""
    """The cavity mode that sets the notch when the cavity governs."""

    def notch_at(self, er_ratio: float, h_ratio: float) -> float:
        """Notch with er and h scaled by the given ratios (see the module docstring)."""
        cavity = (self.notch_hz if self.governs == "cavity" else self.modes[0].f_hz) / math.sqrt(er_ratio)
        if self.lc_f_hz is None:
            return cavity
        return min(cavity, self.lc_f_hz * math.sqrt(h_ratio / er_ratio))

    def to_json(self) -> dict:
        out = {"index": self.index,
               "modes": [{"f_hz": round_hz(m.f_hz), "method": m.method} for m in self.modes]}
        if self.lc_f_hz is not None:
            out["lc_f_hz"] = round_hz(self.lc_f_hz)
        out["notch_hz"] = round_hz(self.notch_hz)
        out["governs"] = self.governs
        if self.notch_label:
            out["notch_mode"] = self.notch_label
        return out


@dataclass(frozen=True)
class Corner:
    """One point of the tolerance sweep and the notch range of all cells there."""

    er: float
    h: float
    low_hz: float
    high_hz: float


@dataclass(frozen=True)
class Estimate:
    """Per-cell estimates, the spread of their notch centres over the sweep, and the model's rejection.

    ``low_hz`` / ``high_hz`` span every cell's notch at every sweep corner;
    ``target_in_spread`` is low <= target <= high (None without a target).  ``rejection`` is the circuit
    model's response (``rejection.Rejection``), when it was asked for.
    """

    cells: tuple[CellEstimate, ...]
    low_hz: float
    high_hz: float
    target_hz: float | None
    target_in_spread: bool | None
    er: float
    h: float
    er_tolerance: float
    h_tolerance: float
    corners: tuple[Corner, ...]
    rejection: object = None

    def to_json(self) -> dict:
        """JSON-ready dict with stable keys and values rounded to 1 kHz / 1 nm."""
        out: dict = {
            "cells": [c.to_json() for c in self.cells],
            "notch_spread": {"low_hz": round_hz(self.low_hz), "high_hz": round_hz(self.high_hz)},
        }
        if self.target_hz is not None:
            out["target_hz"] = round_hz(self.target_hz)
        out["target_in_spread"] = self.target_in_spread
        out["sweep"] = {
            "er": _num(self.er), "er_tolerance": _num(self.er_tolerance),
            "h_mm": _num(self.h), "h_tolerance": _num(self.h_tolerance),
            "corners": [{"er": _num(c.er), "h_mm": _num(c.h), "low_hz": round_hz(c.low_hz),
                         "high_hz": round_hz(c.high_hz)}
                        for c in self.corners],
        }
        out["caution"] = CAUTION
        out["model"] = self.rejection.to_json() if self.rejection is not None else None
        return out


def estimate_layout(layout: Layout, accuracy: float = 0.01, model: bool = False, etch: bool = True) -> Estimate:
    """Estimate every placed cell's resonances and the spread of their notches; with ``model`` also the circuit
    model's Scc21/Sdd21 and its tolerance corners (``etch`` False: without the etch corners, for copper read
    from a board)."""
    spec = layout.spec
    # Cells drawn alike (same copper relative to the centre, same turn) resonate alike: each shape is solved once.
    solved: dict[tuple, CellEstimate] = {}
    cells = []
    for cell in layout.cells:
        key = _shape_key(cell)
        if key not in solved:
            solved[key] = estimate_cell(cell, spec.er, spec.h, spec.bridge_length, accuracy,
                                        centred=spec.style != "folded")
        cells.append(replace(solved[key], index=cell.index))
    cells = tuple(cells)
    er_ratios = _ratios(spec.er_tolerance)
    h_ratios = _ratios(spec.h_tolerance)
    corners = []
    for r_er in er_ratios:
        for r_h in h_ratios:
            notches = [c.notch_at(r_er, r_h) for c in cells]
            corners.append(Corner(spec.er * r_er, spec.h * r_h, min(notches), max(notches)))
    low = min(c.low_hz for c in corners)
    high = max(c.high_hz for c in corners)
    target = spec.target_hz
    inside = None if target is None else bool(low <= target <= high)
    rejection = None
    if model:
        from .rejection import model_rejection, sweep

        rejection = model_rejection(layout, sweep(layout, target, [c.notch_hz for c in cells]), etch=etch)
    return Estimate(cells, low, high, target, inside, spec.er, spec.h, spec.er_tolerance, spec.h_tolerance,
                    tuple(corners), rejection)


def _shape_key(cell: PlacedCell) -> tuple:
    """The cell's patch and bridge vertices relative to its centre, in grid steps, and its turn."""
    steps = [np.rint((shapely.get_coordinates(g) - cell.centre) / GRID_MM).astype(np.int64).tobytes()
             for g in (cell.patch, *cell.bridges)]
    return (cell.rotation_deg, *steps)


def estimate_cell(cell: PlacedCell, er: float, h: float, bridge_length: float | None,
                  accuracy: float = 0.01, centred: bool = True) -> CellEstimate:
    """Lowest three cavity modes of the drawn patch, the LC resonance if it has bridges, and its notch.

    A plain rectangle gets the closed form, with m counting half-waves along
    the pair (the cell's u axis) and n across it; with the pair ``centred`` on
    the patch its notch is the lowest mode even about the pair (n even, see
    the module docstring).  Any other patch gets the numerical solve and its
    lowest mode.
    """
    notch_mode = None
    if is_rectangle(cell.patch):
        along_x = affinity.rotate(cell.patch, -cell.rotation_deg, origin=cell.centre)
        x0, y0, x1, y1 = along_x.bounds
        a, b = x1 - x0, y1 - y0
        found = rect_modes(a, b, er, 6)
        modes = tuple(Mode(f, "cavity-analytic", f"TM{m}{n}") for f, m, n in found[:3])
        if centred:
            f, m, n = next(t for t in found if t[2] % 2 == 0)
            notch_mode = Mode(f, "cavity-analytic", f"TM{m}{n}")
    else:
        modes = tuple(Mode(f, "cavity-numeric", f"mode {i + 1}")
                      for i, f in enumerate(polygon_modes(cell.patch, er, 3, accuracy)))
    notch_mode = notch_mode or modes[0]
    lc = None
    if cell.bridges:
        lc = lc_notch(cell.patch, cell.bridges, h, er, bridge_length)
    if lc is not None and lc < notch_mode.f_hz:
        return CellEstimate(cell.index, modes, lc, lc, "lc")
    return CellEstimate(cell.index, modes, lc, notch_mode.f_hz, "cavity", notch_mode.label)


def is_rectangle(polygon: Polygon, grid_mm: float = GRID_MM) -> bool:
    """True for a plain four-cornered rectangle at any angle.

    Its area must equal its minimum rotated rectangle's to within what snapping
    the corners to the engine's grid can change (perimeter x 2 grid steps).
    """
    plain = polygon.simplify(0)
    if plain.interiors or len(plain.exterior.coords) != 5:
        return False
    return abs(plain.minimum_rotated_rectangle.area - plain.area) <= 2 * grid_mm * plain.length


def format_table(estimate: Estimate, units: str = "mm") -> str:
    """Terminal table: per cell its modes, LC resonance and notch, then the band and the target (h in ``units``)."""
    rows = [("cell", "mode", "frequency", "method")]
    notes = []
    for cell in estimate.cells:
        first = True
        for mode in cell.modes:
            rows.append((str(cell.index) if first else "", mode.label, format_hz(mode.f_hz), mode.method))
            first = False
        if cell.lc_f_hz is not None:
            rows.append(("", "LC", format_hz(cell.lc_f_hz), "lumped (plate C, bridge L)"))
            if abs(cell.lc_f_hz / cell.modes[0].f_hz - 1) < INTERACTION:
                notes.append(f"cell {cell.index}: LC and cavity resonances are within {INTERACTION:.0%}; "
                             "they interact and both estimates are rough")
        mode = f", {cell.notch_label}" if cell.notch_label else ""
        rows.append(("", "notch", format_hz(cell.notch_hz), f"{cell.governs} governs{mode}"))
    widths = [max(len(r[i]) for r in rows) for i in range(4)]
    lines = ["  ".join(v.ljust(w) for v, w in zip(r, widths)).rstrip() for r in rows]
    lines.insert(1, "  ".join("-" * w for w in widths))
    lines.append("")
    lines.append(f"spread of the cell notch centres {format_hz(estimate.low_hz)} .. {format_hz(estimate.high_hz)} "
                 f"over er {estimate.er:g} +-{estimate.er_tolerance:.0%} and h {format_length(estimate.h, units)} "
                 f"+-{estimate.h_tolerance:.0%} (resonance centres, not a stopband)")
    if estimate.target_hz is not None:
        where = "inside" if estimate.target_in_spread else "outside"
        lines.append(f"target {format_hz(estimate.target_hz)}: {where} that spread")
    lines.extend(notes)
    if estimate.rejection is not None:
        lines.append("")
        lines.extend(format_rejection(estimate.rejection.to_json(), units))
    lines.append(f"caution: {CAUTION}")
    return "\n".join(lines)


def format_rejection(data: dict, units: str = "mm") -> list[str]:
    """The model's figures (a ``Rejection.to_json`` dict), each line saying they come from the model; etch in units."""
    cc = data["scc21"]
    level = f"{cc['threshold_db']:g} dB"
    out = [f"model (circuit model, not a full-wave run): Scc21 notch {format_hz(cc['notch_hz'])}, "
           f"depth {cc['depth_db']:.1f} dB, Sdd21 there {data['sdd21_at_notch_db']:.2f} dB"]
    if cc["stopband_hz"] is None:
        out.append(f"model: nominal stopband at {level}: none (Scc21 never reaches {level})")
    else:
        out.append(f"model: nominal stopband at {level}: {format_hz(cc['stopband_hz'][0])} .. "
                   f"{format_hz(cc['stopband_hz'][1])}")
    low, high = data["notch_spread_hz"]
    tol = data["tolerances"]
    out.append(f"model: over the nominal and {len(data['tolerance']['corners']) - 1} corners (er +-{tol['er']:.0%}, h and pair_h +-{tol['h']:.0%}, "
               f"etch +-{format_length(tol['etch_mm'], units)}): notch spread {format_hz(low)} .. {format_hz(high)}, shallowest "
               f"depth {data['tolerance']['worst_depth_db']:.1f} dB")
    bands = data["tolerance"]["guaranteed_stopband_hz"]
    out.append(f"model: guaranteed stopband at {level}: " + (", ".join(
        f"{format_hz(a)} .. {format_hz(b)}" for a, b in bands) if bands else "none (no frequency is rejected "
        "at every corner)"))
    if data["target_hz"] is not None:
        covered = "covers" if data["target_covered"] else "does not cover"
        at = "" if data["scc21_at_target_db"] is None else (
            f"; Scc21 there {data['scc21_at_target_db']:.1f} dB, Sdd21 {data['sdd21_at_target_db']:.2f} dB")
        out.append(f"model: the guaranteed stopband {covered} the target {format_hz(data['target_hz'])} "
                   f"+-{data['target_margin']:.1%}{at}")
    out.append(f"model caution: {data['model_caution']}")
    return out


def _ratios(tolerance: float) -> tuple[float, ...]:
    return tuple(sorted({1.0 - tolerance, 1.0, 1.0 + tolerance}))



def _num(value: float) -> float:
    return float(round(value, 6))
