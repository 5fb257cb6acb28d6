"""The second sizing pass: every cell re-sized after a field solve (or a measurement) of the drawn filter.

Kept apart from ``sizing.py``, whose model sizing it reuses, because it starts from a spec and an observed
notch rather than from a target.
"""
from __future__ import annotations

from types import SimpleNamespace

from ..errors import EbgError, SpecError
from ..errors import check_positive as _check
from ..spec import FilterSpec
from ..units import format_length
from ..units import round_hz as _hz
from .band import CAUTION, estimate_cell
from .rejection import MODEL_CAUTION
from .sizing import FULL_WAVE_NOTE, land_on_model_notch, model_notch_hz, origin_cell, size_for_target, spec_pair


def refine(spec: FilterSpec, observed_hz: float, keep: str = "across", observed_from: dict | None = None) -> dict:
    """Second pass: re-size every cell after a field solve (or a measurement) of the drawn filter notched at
    ``observed_hz``, through the circuit model.

    The model puts the drawn filter's notch at f_model; the observed notch says the model reads f_model /
    f_obs too high (or low) for this geometry, and that ratio is carried to the new size: every patch is scaled
    by one common factor (the along size; with ``keep`` = "aspect" both) until the model's notch of the spec
    re-built with them is f_target * f_model / f_obs (secant search as in ``size_with_model``).  The usual
    two-stage correction of the formula alone (f_design = f_target * f_target / f_obs, each cell re-sized by
    its own cavity or LC formula) is kept under "formula" for comparison.  ``keep`` = "across" holds each
    patch's across size (set by the pair and the bridge keep-out).  Returns {"target_hz", "observed_hz",
    "factor", "design_hz", "model", "patches", "check_errors", "formula", "caution"}, and "observed_from" (e.g.
    the result file and its source) when given.
    """
    from dataclasses import replace

    from ..checks import run_checks
    from ..layout import build_layout

    if spec.target_hz is None:
        raise SpecError("target", "(missing)", "refine needs the spec's target frequency")
    _check(observed_hz=observed_hz)
    if keep not in ("across", "aspect"):
        raise EbgError(f"keep = {keep!r}: must be 'across' or 'aspect'")
    factor = spec.target_hz / observed_hz
    formula = _refine_by_formula(spec, factor, keep)
    model_now = model_notch_hz(build_layout(spec), spec.target_hz, near_hz=spec.target_hz)
    model_goal = spec.target_hz * model_now / observed_hz

    def build(scale: float):
        patches = tuple((round(a * scale, 3), round(b * scale, 3) if keep == "aspect" else b)
                        for a, b in spec.patches)  # 1 um, as row_spec
        try:
            return build_layout(replace(spec, patches=patches))
        except EbgError as exc:
            raise EbgError(f"refine: the cells re-sized by {scale:.4f} no longer fit the spec: {exc}") from None

    scale, notch, iterations, layout = land_on_model_notch(build, observed_hz / spec.target_hz, model_goal,
                                                           anchor=(1.0, model_now))
    patches = [[round(a, 6), round(b, 6)] for a, b in layout.spec.patches]
    out = {"target_hz": _hz(spec.target_hz), "observed_hz": _hz(observed_hz), "factor": round(factor, 9),
           "design_hz": _hz(spec.target_hz * factor),
           "model": {"notch_before_hz": _hz(model_now), "reads": round(model_now / observed_hz, 9),
                     "goal_hz": _hz(model_goal), "notch_after_hz": _hz(notch), "scale": round(scale, 9),
                     "iterations": iterations, "model_caution": MODEL_CAUTION},
           "patches": patches,
           "check_errors": sorted({f.rule for f in run_checks(layout).errors}),
           "formula": formula, "caution": CAUTION}
    if observed_from:
        out["observed_from"] = dict(observed_from)
    return out


def _refine_by_formula(spec: FilterSpec, factor: float, keep: str) -> dict:
    """The formula's two-stage correction: each cell's own cavity or LC notch scaled by ``factor`` and the cell
    re-sized for it by ``size_for_target``."""
    bridge, shape = None, None
    if spec.style == "bridged":
        bridge = (spec.bridge_width, spec.bridge_length, spec.bridges_per_side)
        shape = SimpleNamespace(slot=spec.slot, bridge_width=spec.bridge_width, bridge_length=spec.bridge_length,
                                bridges_per_side=spec.bridges_per_side)
    cells, patches = [], []
    for i, size in enumerate(spec.patches):
        model = estimate_cell(origin_cell(size, shape), spec.er, spec.h, spec.bridge_length).notch_hz
        sized = size_for_target(model * factor, spec.er, spec.style, size[1] / size[0], spec.h, bridge,
                                spec.slot if bridge else None, size[1] if keep == "across" else None)
        cells.append({"index": i, "model_hz": _hz(model), "design_hz": _hz(model * factor), "patch": sized["patch"]})
        patches.append(sized["patch"])
    return {"cells": cells, "patches": patches}


def format_refine(result: dict, units: str = "mm") -> str:
    """Terminal summary of ``refine``, lengths in the spec's ``units``: where the observed notch came from, what
    the circuit model made of it, the formula's sizes for comparison, and the model's sizes as a ``patches`` line
    to paste into the spec's [cut] table in place of ``patch`` and ``count``."""
    lines = []
    origin = result.get("observed_from")
    if origin:
        lines.append(f"observed notch from {origin['file']} ({origin['source']})")
        if origin.get("note"):
            lines.append(f"note: {origin['note']}")
    model = result["model"]
    lines.append(f"target {result['target_hz'] / 1e9:.4g} GHz, observed {result['observed_hz'] / 1e9:.4g} GHz")
    lines.append(f"circuit model (not a full-wave run): the drawn filter notches at {model['notch_before_hz'] / 1e9:.4g}"
                 f" GHz, {100 * (model['reads'] - 1):+.2f} % from the observed; re-sized (x{model['scale']:.4f}) so "
                 f"the model notches at {model['notch_after_hz'] / 1e9:.4g} GHz (goal {model['goal_hz'] / 1e9:.4g} GHz)")
    for i, patch in enumerate(result["patches"]):
        a, b = (format_length(v, units) for v in patch)
        was = result["formula"]["cells"][i]
        lines.append(f"  cell {i}: patch {a} along x {b} across (formula alone: {format_length(was['patch'][0], units)}"
                     f" x {format_length(was['patch'][1], units)}, designed for {was['design_hz'] / 1e9:.4g} GHz)")
    lines.append(FULL_WAVE_NOTE)
    if result["check_errors"]:
        lines.append(f"warning: the re-sized filter fails the checks {', '.join(result['check_errors'])}; run check "
                     "on the pasted spec")
    lines.append(f'paste into the spec\'s [cut] table in place of patch and count (units = "{units}"):')
    lines.append("patches = [" + ", ".join(spec_pair(p, units) for p in result["patches"]) + "]")
    lines.append(f"caution: {result['caution']}")
    return "\n".join(lines)
