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
from .rejection import MODEL_CAUTION, model_rejection

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

    scale, notch, iterations, layout = _land_on_model_notch(build, observed_hz / spec.target_hz, model_goal,
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
        model = estimate_cell(_cell(size, shape), spec.er, spec.h, spec.bridge_length).notch_hz
        sized = size_for_target(model * factor, spec.er, spec.style, size[1] / size[0], spec.h, bridge,
                                spec.slot if bridge else None, size[1] if keep == "across" else None)
        cells.append({"index": i, "model_hz": _hz(model), "design_hz": _hz(model * factor), "patch": sized["patch"]})
        patches.append(sized["patch"])
    return {"cells": cells, "patches": patches}


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
        lines.append(FULL_WAVE_NOTE)
    lines.append(f'paste into the spec\'s [cut] table (units = "{units}"):')
    lines.append(f"patch = {_spec_pair(result['patch'], units)}")
    lines.append(f"caution: {result['caution']}")
    return "\n".join(lines)


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
    lines.append("patches = [" + ", ".join(_spec_pair(p, units) for p in result["patches"]) + "]")
    lines.append(f"caution: {result['caution']}")
    return "\n".join(lines)


def _spec_pair(mm: list, units: str) -> str:
    return "[" + ", ".join(spec_number(v, units) for v in mm) + "]"


FULL_WAVE_NOTE = ("how far the model sits from full-wave runs of stored cases: the README's table under "
                  "*The rejection model*")

MODEL_TOLERANCE = 0.002
"""``size_with_model`` and ``refine`` stop when the modelled notch is this close to the target (relative)."""


def size_with_model(target_hz: float, er: float, pair: tuple[float, float], style: str = "straight",
                    aspect: float = DEFAULT_ASPECT, h: float = 0.1, pair_h: float | None = None,
                    bridge: tuple[float, float, int] | None = None, slot: float = 0.15, count: int = 3,
                    tan_d: float = 0.02, corner_margin: float = 0.4, passes: int | None = None) -> dict:
    """Patch [along, across] (mm) whose notch in the circuit model (``rejection``) lands on ``target_hz``.

    ``pair`` = (width, spacing) of the traces: the across size is at least what keeps both traces of every pass
    (folded: ``passes``, default 3, at the default lane gap) ``corner_margin`` from the patch corners.  Starts from ``size_for_target`` (the cavity or LC formula), then
    builds a row of ``count`` cells on a straight pair over one cut plane (pair height ``pair_h``, default
    ``h``, loss tangent ``tan_d``), reads the model's Scc21 notch and corrects the along size by the secant
    method on log(size) against log(notch) until within ``MODEL_TOLERANCE``.  The result is checked with the
    project's own rules; a size they reject raises an error naming the rules.  Returns ``size_for_target``'s
    keys plus "formula_hz" (the per-cell estimate of the final size), "model_hz", "pair", "count" and
    "iterations".
    """
    from ..layout import build_layout
    from ..spec import spec_from_dict

    width, spacing = pair
    _check(pair_width=width, pair_spacing=spacing)
    if isinstance(tan_d, bool) or not isinstance(tan_d, (int, float)) or not 0 <= tan_d < 1:
        raise EbgError(f"tan_d = {tan_d!r}: must be a number from 0 to below 1")
    passes = _passes(style, passes)
    pitch = 2 * width + spacing + max(3 * width, 2 * spacing)  # the spec's default lane gap
    across_min = 2 * width + spacing + (passes - 1) * pitch + 2 * corner_margin
    first = size_for_target(target_hz, er, style, aspect, h, bridge, slot if bridge else None)
    along, across = first["patch"]
    across = max(across, across_min)
    row = dict(target_hz=target_hz, er=er, pair=pair, style=style, h=h, pair_h=pair_h, bridge=bridge, slot=slot,
               tan_d=tan_d, passes=passes)

    def build(along_mm: float):
        return build_layout(spec_from_dict(row_spec([[along_mm, across]] * count, **row)))

    along, notch, iterations, layout = _land_on_model_notch(build, along, target_hz, anchor=(along, target_hz))
    along, across = layout.spec.patches[0]
    _must_pass_checks(layout, pair)
    shape = None if bridge is None else SimpleNamespace(slot=slot, bridge_width=bridge[0], bridge_length=bridge[1],
                                                        bridges_per_side=bridge[2])
    cell = estimate_cell(_cell((along, across), shape), er, h, bridge[1] if bridge else None)
    out = _result(style, target_hz, er, (along, across), cell)
    out.update({"formula_hz": _hz(cell.notch_hz), "model_hz": _hz(notch), "pair": [width, spacing],
                "count": count, "iterations": iterations, "tan_d": tan_d, "pair_h_mm": pair_h or h})
    if style == "folded":
        out["passes"] = passes
    if bridge is not None:
        out.update({"h_mm": h, "bridge": {"width": bridge[0], "length": bridge[1], "per_side": bridge[2],
                                          "slot": slot}, "lc_f_hz": _hz(cell.lc_f_hz)})
    return out


def row_spec(patches: list, *, target_hz: float, er: float, pair: tuple[float, float], style: str = "straight",
             h: float = 0.1, pair_h: float | None = None, bridge: tuple[float, float, int] | None = None,
             slot: float = 0.15, tan_d: float = 0.02, tolerances: dict | None = None, rules: dict | None = None,
             passes: int | None = None, name: str = "sized") -> dict:
    """A spec (mm) of one row of ``patches`` ([along, across] each, rounded to 1 um: what a fab drawing holds, and
    odd-nm sizes let neighbouring webs round 1 nm short) on a straight pair over one cut plane: what sizing
    models and checks.  ``tolerances`` may set er_tolerance, h_tolerance and etch_tolerance, ``rules`` the
    [rules] table."""
    cut = {"style": style, "patches": [[round(a, 3), round(b, 3)] for a, b in patches], "slot": slot, "web": 0.3}
    if bridge is not None:
        cut["bridge"] = {"width": bridge[0], "length": bridge[1], "per_side": bridge[2]}
    if style == "folded":
        cut["passes"] = _passes(style, passes)
    run = sum(a + slot + 0.3 for a, _ in patches) + 10.0
    return {"name": name, "target": target_hz,
            "pair": {"width": pair[0], "spacing": pair[1], "path": [[0, 0], [round(run, 6), 0]]},
            "cut": cut, "stackup": {"er": er, "h": h, "pair_h": pair_h or h, "tan_d": tan_d, **(tolerances or {})},
            "rules": dict(rules or {})}


def model_notch_hz(layout, around_hz: float, near_hz: float | None = None) -> float:
    """The nominal Scc21 notch of ``layout`` in the circuit model, swept 0.6-1.4 x ``around_hz``: the prominent
    dip nearest ``near_hz`` when given (the cells' own cavity mode, where a row also has other dips, such as a
    folded route's loop resonances), else the deepest point."""
    from ..response import dip_indices, summarize

    freq = np.linspace(0.6 * around_hz, 1.4 * around_hz, 1001)
    curve = model_rejection(layout, freq, corners=False).corners["nominal"]
    dips = dip_indices(curve)
    if near_hz is None or not dips:
        return summarize(freq, curve).notch_hz
    k = min(dips, key=lambda i: abs(freq[i] - near_hz))
    lo, hi = max(k - 1, 0), min(k + 2, len(freq))
    return summarize(freq[lo:hi], curve[lo:hi]).notch_hz


def _land_on_model_notch(build, size: float, target_hz: float,
                         anchor: tuple[float, float]) -> tuple[float, float, int, object]:
    """Secant search on log(size) against log(notch) for the size whose built layout's model notch is
    ``target_hz`` (a cavity mode scales as 1 / size, the first step's slope); returns (size, notch,
    iterations, layout).  ``anchor`` = (size, notch) of a known point of the cells' own mode: each size's dip is
    the one nearest that mode scaled as 1 / size, so the search follows one mode.  Raises when it does not
    settle within ``MODEL_TOLERANCE`` in 8 sizes rather than return a size that misses."""
    def notch_of(layout, a: float) -> float:
        return model_notch_hz(layout, target_hz, near_hz=anchor[1] * anchor[0] / a)

    layout = build(size)
    points = [(size, notch_of(layout, size))]
    while abs(points[-1][1] / target_hz - 1) > MODEL_TOLERANCE and len(points) < 8:
        a1, f1 = points[-1]
        slope = -1.0
        if len(points) > 1:
            a0, f0 = points[-2]
            if a1 != a0 and f1 != f0 and math.log(f1 / f0) / math.log(a1 / a0) < -0.05:
                slope = math.log(f1 / f0) / math.log(a1 / a0)
        a2 = a1 * math.exp(math.log(target_hz / f1) / slope)
        layout = build(a2)
        points.append((a2, notch_of(layout, a2)))
    size, notch = points[-1]
    if abs(notch / target_hz - 1) > MODEL_TOLERANCE:
        raise EbgError(f"model sizing: the model's notch did not settle within {MODEL_TOLERANCE:.1%} of "
                       f"{target_hz / 1e9:.4g} GHz in {len(points)} sizes (last {notch / 1e9:.4g} GHz); size by the "
                       "formula (size without --pair) and check the drawn cut with fullwave")
    return size, notch, len(points), layout


def _passes(style: str, passes: int | None) -> int:
    """Passes of the pair over the row: 1 unless folded (default 3, the fewest a fold the engine generates from
    a straight route makes: it needs an odd count to leave in the original direction)."""
    if style != "folded":
        if passes not in (None, 1):
            raise SpecError("cut.passes", passes, f"only the folded style takes passes (style is {style!r})")
        return 1
    if passes is None:
        return 3
    if isinstance(passes, bool) or not isinstance(passes, int) or not 3 <= passes <= 19 or passes % 2 == 0:
        raise SpecError("cut.passes", passes, "folded: must be an odd whole number from 3 to 19")
    return passes


def _must_pass_checks(layout, pair) -> None:
    from ..checks import run_checks

    report = run_checks(layout)
    if report.errors:
        rules = sorted({f.rule for f in report.errors})
        raise SpecError("pair", list(pair), f"the sized cell fails the checks {', '.join(rules)}; widen the patch "
                        "(aspect) or change the pair")


STAGGER_STEPS = (0.01, 0.015, 0.02, 0.025, 0.03, 0.04)
"""Relative steps between neighbouring sizes' notches that ``size_for_band`` tries for a staggered row."""
BAND_POINTS = 41
"""Frequencies across the required band at which every corner is judged (steps of 2.5 % of the band)."""


def size_for_band(low_hz: float, high_hz: float, depth_db: float, er: float, pair: tuple[float, float], *,
                  style: str = "straight", aspect: float = DEFAULT_ASPECT, h: float = 0.1,
                  pair_h: float | None = None, bridge: tuple[float, float, int] | None = None, slot: float = 0.15,
                  tan_d: float = 0.02, tolerances: dict | None = None, max_cells: int = 16,
                  max_sizes: int = 4, passes: int | None = None) -> dict:
    """The fewest cells (then the fewest sizes) whose modelled Scc21 is at or below -``depth_db`` from
    ``low_hz`` to ``high_hz`` at every tolerance corner (``rejection.model_rejection``: er, h, pair_h, etch).

    One size is first landed on the band's centre by ``size_with_model``.  A row of n cells with k sizes
    interleaves k patches whose formula notches step by a relative ``STAGGER_STEPS`` value about the centre
    (a cavity mode scales as 1 / size, so the along sizes step by its inverse; the across size stays).  Rows are
    tried for n = 1 .. ``max_cells``, k = 1 .. ``max_sizes``, every step; the first that meets the requirement
    is returned with "met" True, else the row whose worst in-band level came closest, with "met" False and its
    "shortfall_db".  Each tried row is built and checked with the project's rules like ``size_with_model``.
    """
    from ..layout import build_layout
    from ..spec import spec_from_dict
    from .rejection import model_rejection

    _check(low_hz=low_hz, depth_db=depth_db)
    if not high_hz > low_hz:
        raise EbgError(f"band = {low_hz / 1e9:g}..{high_hz / 1e9:g} GHz: the high edge must be above the low edge")
    for key, value, most in (("max cells", max_cells, 200), ("max sizes", max_sizes, 12)):
        if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= most:
            raise EbgError(f"{key} = {value!r}: must be a whole number from 1 to {most}")
    centre = (low_hz + high_hz) / 2
    base = size_with_model(centre, er, pair, style, aspect, h, pair_h, bridge, slot, 3, tan_d, passes=passes)
    along, across = base["patch"]
    row = dict(target_hz=centre, er=er, pair=pair, style=style, h=h, pair_h=pair_h, bridge=bridge, slot=slot,
               tan_d=tan_d, tolerances=tolerances, passes=passes,
               rules={"rejection_db": -depth_db, "target_margin": round((high_hz - low_hz) / (high_hz + low_hz), 9)})
    band = np.linspace(low_hz, high_hz, BAND_POINTS)
    tried: dict[tuple, tuple] = {}

    def worst_level(count: int, sizes: int, step: float) -> float:
        """The highest Scc21 (dB) in the band over every corner for this row; +inf when it cannot be drawn."""
        if (count, sizes, step) not in tried:
            alongs = [along / (1 + step * (i - (sizes - 1) / 2)) for i in range(sizes)]
            patches = [[alongs[i % sizes], across] for i in range(count)]
            try:
                layout = build_layout(spec_from_dict(row_spec(patches, **row)))
                worst = float(np.max(list(model_rejection(layout, band).corners.values())))
            except EbgError:  # a size the engine cannot draw (an etch corner closing a neck) is no candidate
                layout, worst = None, math.inf
            tried[(count, sizes, step)] = (worst, patches, layout)
        return tried[(count, sizes, step)][0]

    # more cells reject more (each adds its own cavity loss), so a row that fails with max_cells is dropped and the
    # fewest cells of one that passes are found by bisection, bounded above by the best count so far
    rows = [(sizes, step) for sizes in range(1, min(max_cells, max_sizes) + 1)
            for step in (STAGGER_STEPS if sizes > 1 else (0.0,))]
    chosen = None
    for sizes, step in rows:
        top = max_cells if chosen is None else chosen[0] - 1
        if top < sizes or worst_level(top, sizes, step) > -depth_db:
            continue
        low = sizes - 1  # fails (or is below the row's size count)
        while top - low > 1:
            mid = (low + top) // 2
            if mid >= sizes and worst_level(mid, sizes, step) <= -depth_db:
                top = mid
            else:
                low = mid
        chosen = (top, sizes, step)
    if chosen is None:
        chosen = min(tried, key=lambda k: tried[k][0])
    count, sizes, step = chosen
    worst, patches, layout = tried[chosen]
    _must_pass_checks(layout, pair)
    wide = np.linspace(low_hz - 0.5 * (high_hz - low_hz) - 0.02 * centre,
                       high_hz + 0.5 * (high_hz - low_hz) + 0.02 * centre, 401)
    model = model_rejection(layout, wide).to_json()
    return {"style": style, "er": er, "band_hz": [_hz(low_hz), _hz(high_hz)], "depth_db": depth_db,
            "met": worst <= -depth_db, "target_covered": model["target_covered"], "worst_in_band_db": round(worst, 2),
            "shortfall_db": round(max(0.0, worst + depth_db), 2), "count": count, "sizes": sizes,
            "stagger_step": step, "patches": [list(p) for p in layout.spec.patches],
            "limits": {"max_cells": max_cells, "max_sizes": max_sizes},
            "tolerances": model["tolerances"], "notch_spread_hz": model["notch_spread_hz"],
            "guaranteed_stopband_hz": model["tolerance"]["guaranteed_stopband_hz"],
            "nominal_scc21": model["scc21"], "pair": list(pair), "tan_d": tan_d, "pair_h_mm": pair_h or h,
            "centre_patch": base["patch"], "model_caution": model["model_caution"],
            "caution": CAUTION}


def format_band_sizing(result: dict, units: str = "mm") -> str:
    """Terminal summary of ``size_for_band``: the verdict, the model's figures labelled as the model's, and the
    lines to paste into a spec whose units are ``units`` (its target, [cut] and [rules] tables)."""
    low, high = result["band_hz"]
    band = f"{low / 1e9:.4g}-{high / 1e9:.4g} GHz"
    kind = "one size" if result["sizes"] == 1 else (f"{result['sizes']} staggered sizes, notches "
                                                     f"{100 * result['stagger_step']:g} % apart")
    if result["met"]:
        lines = [f"meets {result['depth_db']:g} dB of common-mode rejection over {band} at every tolerance corner in the circuit "
                 f"model: {result['count']} cells, {kind} (worst in band {result['worst_in_band_db']:g} dB)"]
    else:
        lines = [f"no design within {result['limits']['max_cells']} cells and {result['limits']['max_sizes']} "
                 f"sizes meets {result['depth_db']:g} dB over {band} at every tolerance corner in the circuit model; the best "
                 f"found: {result['count']} cells, {kind}, worst in band {result['worst_in_band_db']:g} dB, "
                 f"short by {result['shortfall_db']:g} dB"]
    tol = result["tolerances"]
    guaranteed = ", ".join(f"{a / 1e9:.4g}-{b / 1e9:.4g} GHz" for a, b in result["guaranteed_stopband_hz"]) or "none"
    nominal = result["nominal_scc21"]
    lines.append(f"model (not a full-wave run): nominal notch {nominal['notch_hz'] / 1e9:.4g} GHz at "
                 f"{nominal['depth_db']:.1f} dB; notch spread {result['notch_spread_hz'][0] / 1e9:.4g}-"
                 f"{result['notch_spread_hz'][1] / 1e9:.4g} GHz and guaranteed stopband at -{result['depth_db']:g} "
                 f"dB {guaranteed} over er +-{tol['er']:.1%}, h and pair_h +-{tol['h']:.1%}, etch "
                 f"+-{format_length(tol['etch_mm'], units)}")
    lines.append(FULL_WAVE_NOTE)
    centre = (low + high) / 2
    paste = [f'target = "{centre / 1e9:.12g}GHz"', "[cut]"]
    if result["sizes"] == 1:
        paste += [f"patch = {_spec_pair(result['patches'][0], units)}", f"count = {result['count']}"]
    else:
        paste.append("patches = [" + ", ".join(_spec_pair(p, units) for p in result["patches"]) + "]")
    paste += ["[rules]", f"rejection_db = {-result['depth_db']:.12g}",
              f"target_margin = {(high - low) / (high + low):.9g}"]
    lines.append(f'paste into the spec (units = "{units}"; target at the top, the rest into its tables):')
    lines += paste
    lines.append(f"caution: {result['caution']}")
    return "\n".join(lines)
