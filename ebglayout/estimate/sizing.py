"""First-pass patch size for a target notch, and the two-stage correction after a field solve.

Rectangles invert the cavity model's fundamental, f10 = c / (2 a sqrt(er))
(C. A. Balanis, Antenna Theory, 3rd ed., sec. 14.2.2, cavity model of the rectangular patch, from memory),
for the patch's long side.  Bridged cells are sized by solving the same model
``band.estimate_cell`` uses (lower of the LC resonance and the lowest cavity
mode of the drawn, pocketed patch) for the patch scale with Brent's method
(R. P. Brent, Algorithms for Minimization without Derivatives, 1973, via scipy).
"""
from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np


from ..cells.bridged import bridged_cell
from ..cells.shape import rectangle
from ..errors import EbgError, SpecError
from ..errors import check_positive as _check
from ..layout import PlacedCell
from ..physics import tm10_hz, tm10_length_mm
from ..spec import STYLES, FilterSpec
from ..units import format_length, spec_number
from ..units import round_hz as _hz
from .band import CAUTION, estimate_cell

DEFAULT_ASPECT = 0.5
"""Default across / along ratio of a new patch: the fundamental then runs along the pair."""


def size_for_target(target_hz: float, er: float, style: str = "straight", aspect: float = DEFAULT_ASPECT,
                    h: float | None = None, bridge: tuple[float, float, int] | None = None,
                    slot: float | None = None, across: float | None = None) -> dict:
    """First-pass patch [along, across] (mm) whose estimated notch is ``target_hz``.

    The patch keeps ``aspect`` = across / along, or, with ``across`` given,
    that across size (the one the pair and the bridge keep-out constrain) and
    only the along size is solved.  Bridged cells need ``h`` (mm) and
    ``bridge`` = (width, length, per_side); with ``slot`` the pockets a bridge
    longer than the slot cuts into the patch are drawn and counted, without it
    none are.  The search keeps the pockets to at most half the patch width.
    Returns {"style", "target_hz", "er", "patch": [along, across], "notch_hz",
    "governs", "caution"}, plus "h_mm", "bridge" and "lc_f_hz" for bridged cells.
    """
    _check(target_hz=target_hz, er=er, aspect=aspect)
    if across is not None:
        _check(across=across)
    if style not in STYLES:
        raise SpecError("cut.style", style, f"must be one of {', '.join(STYLES)}")

    def dims(along: float) -> tuple[float, float]:
        return (along, across if across is not None else along * aspect)

    if style != "bridged":
        if bridge is not None:
            raise SpecError("cut.bridge", bridge, f"only the bridged style takes bridges (style is {style!r})")
        # the common mode excites the along-the-pair mode TM10 (the across mode is odd about the pair), so the
        # along size is set by the target whatever the aspect
        along = tm10_length_mm(target_hz, er)
        result = estimate_cell(_cell(dims(along), None), er, 1.0, None)
        return _result(style, target_hz, er, dims(along), result)
    if h is None or bridge is None:
        raise SpecError("cut.bridge", bridge, "bridged sizing needs h and bridge = (width, length, per_side)")
    _check(h=h)
    width, length, per_side = bridge
    _check(bridge_width=width, bridge_length=length)
    if isinstance(per_side, bool) or not isinstance(per_side, int) or per_side < 1:
        raise SpecError("cut.bridge.per_side", per_side, "must be a whole number >= 1")
    slot = length if slot is None else slot
    _check(slot=slot)
    if length < slot:
        raise SpecError("cut.bridge.length", length, f"must be >= the slot width ({slot:g} mm)")
    if across is not None and 4 * (length - slot) > across:
        raise SpecError("cut.bridge.length", length, f"its pockets would take more than half the {across:g} mm "
                        "across size")
    shape = SimpleNamespace(slot=slot, bridge_width=width, bridge_length=length, bridges_per_side=per_side)

    def notch(along: float) -> float:
        return estimate_cell(_cell(dims(along), shape), er, h, length).notch_hz

    smallest = per_side * (width + 2 * slot) + slot
    if across is None:
        smallest = max(smallest, 4 * (length - slot) / aspect)
    smallest *= 1.001
    if notch(smallest) < target_hz:
        raise SpecError("target", target_hz, f"is above what these bridges can reach: the smallest patch that "
                        f"holds them with its pockets at most half its width ({smallest:.4g} mm along) "
                        f"notches at {notch(smallest) / 1e9:.4g} GHz")
    largest = smallest * 2
    while notch(largest) > target_hz:
        largest *= 2
        if largest > 1000:
            raise SpecError("target", target_hz, "needs a patch larger than 1 m; check the units")
    from scipy.optimize import brentq  # here, not at import: it costs every CLI start ~0.3 s

    along = brentq(lambda a: notch(a) / target_hz - 1, smallest, largest, xtol=1e-7, rtol=1e-10)
    result = estimate_cell(_cell(dims(along), shape), er, h, length)
    out = _result(style, target_hz, er, dims(along), result)
    out.update({"h_mm": h, "bridge": {"width": width, "length": length, "per_side": per_side, "slot": slot},
                "lc_f_hz": _hz(result.lc_f_hz)})
    return out


def refine(spec: FilterSpec, observed_hz: float, keep: str = "across", observed_from: dict | None = None) -> dict:
    """Second pass: re-size every cell after a field solve of the first pass notched at ``observed_hz``.

    The usual two-stage correction: the model was off by f_obs / f_target, so
    the design target becomes f_design = f_target * f_target / f_obs and the
    patches are re-sized for it with the same model and bridges.  For cells of
    different sizes each cell's own modelled notch is scaled by the same
    factor f_target / f_obs (which gives f_design for a cell the model sized
    for the target).  ``keep`` = "across" holds each patch's across size (set
    by the pair and the bridge keep-out) and re-sizes the along size;
    "aspect" scales both.  Returns {"target_hz", "observed_hz", "factor",
    "design_hz", "cells": [{"index", "model_hz", "design_hz", "patch"}],
    "patches", "caution"}, and "observed_from" (e.g. the result file and its source) when given.
    """
    if spec.target_hz is None:
        raise SpecError("target", "(missing)", "refine needs the spec's target frequency")
    _check(observed_hz=observed_hz)
    if keep not in ("across", "aspect"):
        raise EbgError(f"keep = {keep!r}: must be 'across' or 'aspect'")
    factor = spec.target_hz / observed_hz
    bridge, shape = None, None
    if spec.style == "bridged":
        bridge = (spec.bridge_width, spec.bridge_length, spec.bridges_per_side)
        shape = SimpleNamespace(slot=spec.slot, bridge_width=spec.bridge_width, bridge_length=spec.bridge_length,
                                bridges_per_side=spec.bridges_per_side)
    cells, patches = [], []
    for i, size in enumerate(spec.patches):
        model = estimate_cell(_cell(size, shape), spec.er, spec.h, spec.bridge_length).notch_hz
        sized = size_for_target(model * factor, spec.er, spec.style, size[1] / size[0], spec.h, bridge,
                                spec.slot if bridge else None, size[1] if keep == "across" else None)
        cells.append({"index": i, "model_hz": _hz(model), "design_hz": _hz(model * factor), "patch": sized["patch"]})
        patches.append(sized["patch"])
    out = {"target_hz": _hz(spec.target_hz), "observed_hz": _hz(observed_hz), "factor": round(factor, 9),
           "design_hz": _hz(spec.target_hz * factor), "cells": cells, "patches": patches, "caution": CAUTION}
    if observed_from:
        out["observed_from"] = dict(observed_from)
    return out


def _cell(size: tuple[float, float], bridged: SimpleNamespace | None) -> PlacedCell:
    """A cell at the origin drawn by the engine's own builder, for the estimate to read."""
    if bridged is None:
        patch = outer = rectangle(*size)
        bridges: tuple = ()
    else:
        shape = bridged_cell(bridged, size)
        patch, bridges, outer = shape.patch, shape.bridges, shape.outer
    return PlacedCell(index=0, centre=(0.0, 0.0), rotation_deg=0.0, size=size, patch=patch, bridges=bridges,
                      outer=outer)


def _result(style: str, target_hz: float, er: float, size: tuple[float, float], cell) -> dict:
    return {"style": style, "target_hz": _hz(target_hz), "er": er, "patch": [round(size[0], 6), round(size[1], 6)],
            "notch_hz": _hz(cell.notch_hz), "governs": cell.governs, "caution": CAUTION}




def format_sizing(result: dict, units: str = "mm") -> str:
    """Terminal summary of ``size_for_target``, lengths in ``units``, ending with a ``patch`` line to paste into
    the [cut] table of a spec whose units are ``units``."""
    a, b = (format_length(v, units) for v in result["patch"])
    lines = [f"style {result['style']}: patch {a} along x {b} across for "
             f"{result['target_hz'] / 1e9:.4g} GHz at er {result['er']:g} ({result['governs']} governs)"]
    if result.get("bridge"):
        br = result["bridge"]
        lines.append(f"bridges: {br['per_side']} per side, {format_length(br['width'], units)} wide, "
                     f"{format_length(br['length'], units)} long, slot {format_length(br['slot'], units)}; "
                     f"LC notch {result['lc_f_hz'] / 1e9:.4g} GHz")
    if result.get("model_hz"):
        lines.append(f"circuit model (not a full-wave run), {result['count']} cells, pair "
                     f"{format_length(result['pair'][0], units)} / {format_length(result['pair'][1], units)}: notch "
                     f"{result['model_hz'] / 1e9:.4g} GHz (the cell formula gives this size {result['formula_hz'] / 1e9:.4g} GHz); "
                     "the cell passes the checks")
        across_hz = tm10_hz(result["patch"][1], result["er"])
        if result["patch"][1] > result["patch"][0]:
            lines.append(f"note: the patch is wider across than along; its across mode ({across_hz / 1e9:.4g} GHz) "
                         "is not excited by the common mode but costs the differential signal there (see Sdd21 in "
                         "estimate)")
    lines.append(f'paste into the spec\'s [cut] table (units = "{units}"):')
    lines.append(f"patch = {_spec_pair(result['patch'], units)}")
    lines.append(f"caution: {result['caution']}")
    return "\n".join(lines)


def format_refine(result: dict, units: str = "mm") -> str:
    """Terminal summary of ``refine``, lengths in the spec's ``units``: where the observed notch came from, the
    correction factor and the new patch sizes as a ``patches`` line to paste into the spec's [cut] table in place
    of ``patch`` and ``count``."""
    lines = []
    origin = result.get("observed_from")
    if origin:
        lines.append(f"observed notch from {origin['file']} ({origin['source']})")
        if origin.get("note"):
            lines.append(f"note: {origin['note']}")
    lines.append(f"target {result['target_hz'] / 1e9:.4g} GHz, observed {result['observed_hz'] / 1e9:.4g} GHz: "
                 f"design for {result['design_hz'] / 1e9:.4g} GHz (factor {result['factor']:.4f})")
    for cell in result["cells"]:
        a, b = (format_length(v, units) for v in cell["patch"])
        lines.append(f"  cell {cell['index']}: patch {a} along x {b} across")
    lines.append(f'paste into the spec\'s [cut] table in place of patch and count (units = "{units}"):')
    lines.append("patches = [" + ", ".join(_spec_pair(p, units) for p in result["patches"]) + "]")
    return "\n".join(lines)


def _spec_pair(mm: list, units: str) -> str:
    return "[" + ", ".join(spec_number(v, units) for v in mm) + "]"


MODEL_TOLERANCE = 0.002
"""``size_with_model`` stops when the modelled notch is this close to the target (relative)."""


def size_with_model(target_hz: float, er: float, pair: tuple[float, float], style: str = "straight",
                    aspect: float = DEFAULT_ASPECT, h: float = 0.1, pair_h: float | None = None,
                    bridge: tuple[float, float, int] | None = None, slot: float = 0.15, count: int = 3,
                    tan_d: float = 0.02, corner_margin: float = 0.4) -> dict:
    """Patch [along, across] (mm) whose notch in the circuit model (``rejection``) lands on ``target_hz``.

    ``pair`` = (width, spacing) of the traces: the across size is at least what keeps both traces
    ``corner_margin`` from the patch corners.  Starts from ``size_for_target`` (the cavity or LC formula), then
    builds a row of ``count`` cells on a straight pair over one cut plane (pair height ``pair_h``, default
    ``h``), reads the model's Scc21 notch and corrects the along size by the secant method on log(size) against
    log(notch) until within ``MODEL_TOLERANCE``.  The result is checked with the project's own rules; a size
    they reject raises an error naming the rules.  Returns ``size_for_target``'s keys plus "formula_hz" (the
    per-cell estimate of the final size), "model_hz", "pair", "count" and "iterations".
    """
    from ..checks import run_checks
    from ..layout import build_layout
    from ..response import db20, summarize
    from ..sparams import mixed_mode
    from ..spec import spec_from_dict
    from .network import filter_network

    width, spacing = pair
    _check(pair_width=width, pair_spacing=spacing)
    across_min = 2 * (width + spacing / 2 + corner_margin)
    first = size_for_target(target_hz, er, style, aspect, h, bridge, slot if bridge else None)
    along, across = first["patch"]
    across = max(across, across_min)

    def build(along_mm: float):
        cut = {"style": style, "patch": [round(along_mm, 6), round(across, 6)], "count": count, "slot": slot,
               "web": 0.3}
        if bridge is not None:
            cut["bridge"] = {"width": bridge[0], "length": bridge[1], "per_side": bridge[2]}
        run = count * (along_mm + slot + 0.3) + 10.0
        raw = {"name": "sized", "target": target_hz,
               "pair": {"width": width, "spacing": spacing, "path": [[0, 0], [round(run, 6), 0]]},
               "cut": cut, "stackup": {"er": er, "h": h, "pair_h": pair_h or h, "tan_d": tan_d}}
        return build_layout(spec_from_dict(raw))

    def model_notch(along_mm: float) -> tuple[float, object]:
        layout = build(along_mm)
        freq = np.linspace(0.6 * target_hz, 1.4 * target_hz, 1001)
        scc = db20(mixed_mode(filter_network(layout, freq)).scc21)
        return summarize(freq, scc).notch_hz, layout

    points = [(along, model_notch(along))]
    iterations = 1
    while abs(points[-1][1][0] / target_hz - 1) > MODEL_TOLERANCE and iterations < 8:
        (a1, (f1, _)) = points[-1]
        if len(points) == 1:
            a2 = a1 * f1 / target_hz  # a cavity mode scales as 1 / size
        else:
            (a0, (f0, _)) = points[-2]
            slope = math.log(f1 / f0) / math.log(a1 / a0) if a1 != a0 and f1 != f0 else -1.0
            a2 = a1 * math.exp(math.log(target_hz / f1) / (slope if slope < -0.05 else -1.0))
        points.append((a2, model_notch(a2)))
        iterations += 1
    along, (notch, layout) = points[-1]
    report = run_checks(layout)
    if report.errors:
        rules = sorted({f.rule for f in report.errors})
        raise SpecError("pair", list(pair), f"the sized cell fails the checks {', '.join(rules)}; widen the patch "
                        "(aspect) or change the pair")
    shape = None if bridge is None else SimpleNamespace(slot=slot, bridge_width=bridge[0], bridge_length=bridge[1],
                                                        bridges_per_side=bridge[2])
    cell = estimate_cell(_cell((along, across), shape), er, h, bridge[1] if bridge else None)
    out = _result(style, target_hz, er, (along, across), cell)
    out.update({"formula_hz": _hz(cell.notch_hz), "model_hz": _hz(notch), "pair": [width, spacing],
                "count": count, "iterations": iterations})
    if bridge is not None:
        out.update({"h_mm": h, "bridge": {"width": bridge[0], "length": bridge[1], "per_side": bridge[2],
                                          "slot": slot}, "lc_f_hz": _hz(cell.lc_f_hz)})
    return out
