"""Rules on where the pair crosses the slots: how often, at what angle, how far from a patch corner, whether
P and N cross together, and the P/N skew the whole filter adds.
"""
from __future__ import annotations

import math

from ..crossing import Crossing
from ..layout import Layout, effective_permittivity, skew_ps
from ..spec import FilterSpec
from .context import CheckContext, RuleResult, shown


def _paired(layout: Layout, layer: str) -> tuple[list[Crossing], list[Crossing]]:
    p = sorted(layout.full_crossings(layer, "P"), key=lambda c: c.s_centre)
    n = sorted(layout.full_crossings(layer, "N"), key=lambda c: c.s_centre)
    return p, n


def expected_crossings(spec: FilterSpec) -> int:
    """Full crossings per trace the style implies: 2 per cell, or count + 1 with shared slots, times the passes."""
    per_pass = spec.count + 1 if spec.web == 0 else 2 * spec.count
    return per_pass * spec.passes


def crossing_count(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("crossing-count", unit="")
    required = spec.crossings if spec.crossings is not None else spec.min_crossings
    r.limit = float(required)
    for cut in layout.cuts:
        p, n = _paired(layout, cut.layer)
        r.checked += 1
        r.see(float(min(len(p), len(n))))
        at = (p or n or [None])[0]
        where = at.point if at else layout.cells[0].centre
        if len(p) != len(n):
            r.add("error", f"{cut.layer}: P crosses {len(p)} slots, N crosses {len(n)}", where, len(p) - len(n), 0, cut.layer)
        for cp, cn in zip(p, n):
            if set(cp.bodies) != set(cn.bodies):
                r.add("error", f"{cut.layer}: P crosses {'/'.join(cp.bodies)} where N crosses {'/'.join(cn.bodies)}",
                      cp.point, layer=cut.layer)
        count = min(len(p), len(n))
        if spec.crossings is not None and count != spec.crossings:
            r.add("error", f"{cut.layer}: {count} full crossings per trace, rules.crossings asks for {spec.crossings}",
                  where, count, spec.crossings, cut.layer)
        elif spec.crossings is None and count < spec.min_crossings:
            r.add("error", f"{cut.layer}: {count} full crossings per trace, fewer than rules.min_crossings = "
                  f"{spec.min_crossings}", where, count, spec.min_crossings, cut.layer)
        implied = expected_crossings(spec)
        if count != implied and spec.crossings is None and count >= spec.min_crossings:
            r.add("warning", f"{cut.layer}: {count} full crossings per trace; the {spec.style} style with these "
                  f"cells implies {implied}", where, count, implied, cut.layer)
    return r


def crossing_along(layout: Layout, ctx: CheckContext) -> RuleResult:
    r = RuleResult("crossing-along", unit="mm", limit=0.0)
    for c in layout.crossings:
        r.checked += 1
        if c.kind == "along":
            r.see(c.length, lower_is_worse=False)
            r.add("error", f"{c.layer}: trace {c.polarity} runs {shown(layout, c.length)} inside a slot and leaves onto the "
                  f"copper it came from ({c.bodies[0]})", c.point, c.length, 0.0, c.layer)
        elif c.kind == "ends":
            r.see(c.length, lower_is_worse=False)
            r.add("error", f"{c.layer}: trace {c.polarity} ends inside a slot ({shown(layout, c.length)} inside)",
                  c.point, c.length, 0.0, c.layer)
    return r


def _least_at_full_crossings(layout: Layout, rule: str, unit: str, limit: float, value, describe, show) -> RuleResult:
    """A lower-bound rule evaluated at every full crossing: ``value(c)`` must stay >= ``limit`` (``show`` writes
    a value with its unit)."""
    r = RuleResult(rule, unit=unit, limit=limit)
    for c in layout.crossings:
        v = value(c)
        if c.kind != "full" or not math.isfinite(v):
            continue
        r.checked += 1
        r.see(v)
        if v < limit - 1e-6:
            r.add("error", f"{c.layer}: trace {c.polarity} {describe(show(v))} (min {show(limit)})", c.point, v, limit,
                  c.layer)
    return r


def crossing_angle(layout: Layout, ctx: CheckContext) -> RuleResult:
    return _least_at_full_crossings(layout, "crossing-angle", "deg", layout.spec.min_angle, lambda c: c.angle_deg,
                                    lambda v: f"crosses a slot edge at {v}", lambda v: f"{v:.1f} deg")


def corner_margin(layout: Layout, ctx: CheckContext) -> RuleResult:
    return _least_at_full_crossings(layout, "corner-margin", "mm", layout.spec.corner_margin,
                                    lambda c: c.corner_distance, lambda v: f"crosses {v} from a patch corner",
                                    lambda v: shown(layout, v))


def crossing_symmetry(layout: Layout, ctx: CheckContext) -> RuleResult:
    spec = layout.spec
    r = RuleResult("crossing-symmetry", unit="mm", limit=spec.symmetry)
    er_eff = effective_permittivity(spec)
    for cut in layout.cuts:
        p, n = _paired(layout, cut.layer)
        for cp, cn in zip(p, n):
            r.checked += 1
            offset = abs(cp.s_centre - cn.s_centre)
            r.see(offset, lower_is_worse=False)
            if offset > spec.symmetry + 1e-6:
                r.add("error", f"{cut.layer}: P and N cross this slot {shown(layout, offset)} apart along the pair "
                      f"(~{skew_ps(offset, er_eff):.3g} ps of skew; max {shown(layout, spec.symmetry)})",
                      cp.point, offset, spec.symmetry, cut.layer)
    return r


def fold_skew(layout: Layout, ctx: CheckContext) -> RuleResult:
    """P/N length difference between the first and last slot crossing, from the measured crossing positions."""
    spec = layout.spec
    r = RuleResult("fold-skew", unit="ps", limit=spec.skew_limit_ps)
    cut = layout.cuts[0]
    p, n = _paired(layout, cut.layer)
    if len(p) < 2 or len(p) != len(n):
        return r
    p_span = p[-1].s_trace - p[0].s_trace
    n_span = n[-1].s_trace - n[0].s_trace
    diff = round(p_span - n_span, 6) + 0.0
    er_eff = effective_permittivity(spec)
    ps = skew_ps(diff, er_eff)
    r.checked += 1
    r.see(ps, lower_is_worse=False)
    turns = len(layout.turns)
    r.note = (f"P-N length through the filter {shown(layout, diff, sign=True)} ({ps:.3g} ps)"
              + (f"; {turns} U-turns alternating, {shown(layout, abs(layout.turns[0].p_minus_n))} each" if turns else ""))
    if ps > spec.skew_limit_ps + 1e-9:
        r.add("error", f"P-N length difference through the filter {shown(layout, diff, sign=True)} = {ps:.3g} ps "
              f"(max {spec.skew_limit_ps:g} ps)", p[0].point, ps, spec.skew_limit_ps)
    return r
