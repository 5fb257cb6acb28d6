"""First-pass patch size for a target notch, and the size whose notch in the circuit model lands on it.

Rectangles invert the cavity model's fundamental, f10 = c / (2 a sqrt(er))
(C. A. Balanis, Antenna Theory, 3rd ed., sec. 14.2.2, cavity model of the rectangular patch, from memory),
for the patch's long side.  Bridged cells are sized by solving the same model
``band.estimate_cell`` uses (lower of the LC resonance and the lowest cavity
mode of the drawn, pocketed patch) for the patch scale with Brent's method
(R. P. Brent, Algorithms for Minimization without Derivatives, 1973, via scipy).
The band search (``sizing_band.py``) and the correction after a field solve
(``refinement.py``) build on the model sizing here.
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
from ..spec import STYLES
from ..units import format_length, spec_number
from ..units import round_hz as _hz
from .band import CAUTION, estimate_cell
from .rejection import model_rejection

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
        result = estimate_cell(origin_cell(dims(along), None), er, 1.0, None)
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
        return estimate_cell(origin_cell(dims(along), shape), er, h, length).notch_hz

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
    result = estimate_cell(origin_cell(dims(along), shape), er, h, length)
    out = _result(style, target_hz, er, dims(along), result)
    out.update({"h_mm": h, "bridge": {"width": width, "length": length, "per_side": per_side, "slot": slot},
                "lc_f_hz": _hz(result.lc_f_hz)})
    return out


def origin_cell(size: tuple[float, float], bridged: SimpleNamespace | None) -> PlacedCell:
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
    lines.append(f"patch = {spec_pair(result['patch'], units)}")
    lines.append(f"caution: {result['caution']}")
    return "\n".join(lines)


def spec_pair(mm: list, units: str) -> str:
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

    along, notch, iterations, layout = land_on_model_notch(build, along, target_hz, anchor=(along, target_hz))
    along, across = layout.spec.patches[0]
    must_pass_checks(layout, pair)
    shape = None if bridge is None else SimpleNamespace(slot=slot, bridge_width=bridge[0], bridge_length=bridge[1],
                                                        bridges_per_side=bridge[2])
    cell = estimate_cell(origin_cell((along, across), shape), er, h, bridge[1] if bridge else None)
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


def land_on_model_notch(build, size: float, target_hz: float,
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


def must_pass_checks(layout, pair) -> None:
    from ..checks import run_checks

    report = run_checks(layout)
    if report.errors:
        rules = sorted({f.rule for f in report.errors})
        raise SpecError("pair", list(pair), f"the sized cell fails the checks {', '.join(rules)}; widen the patch "
                        "(aspect) or change the pair")
