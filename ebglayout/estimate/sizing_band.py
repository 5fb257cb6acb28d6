"""Band sizing: the fewest cells and staggered sizes whose modelled rejection covers a band at every corner.

A search over rows built from ``sizing.size_with_model``'s single size; kept apart because it is the one
sizing step that compares whole rows rather than landing one notch.
"""
from __future__ import annotations

import math

import numpy as np

from ..errors import EbgError
from ..errors import check_positive as _check
from ..units import format_length
from ..units import round_hz as _hz
from .band import CAUTION
from .sizing import DEFAULT_ASPECT, FULL_WAVE_NOTE, must_pass_checks, row_spec, size_with_model, spec_pair

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
    must_pass_checks(layout, pair)
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
        paste += [f"patch = {spec_pair(result['patches'][0], units)}", f"count = {result['count']}"]
    else:
        paste.append("patches = [" + ", ".join(spec_pair(p, units) for p in result["patches"]) + "]")
    paste += ["[rules]", f"rejection_db = {-result['depth_db']:.12g}",
              f"target_margin = {(high - low) / (high + low):.9g}"]
    lines.append(f'paste into the spec (units = "{units}"; target at the top, the rest into its tables):')
    lines += paste
    lines.append(f"caution: {result['caution']}")
    return "\n".join(lines)
