"""Design-rule checks over a Layout: findings are data, the report knows how to print itself."""
from __future__ import annotations

from dataclasses import dataclass

from ..units import format_length, in_units


@dataclass(frozen=True)
class Finding:
    """One check result at one place.

    ``rule`` is a stable id (see RULES), ``severity`` "error" or "warning",
    ``value`` and ``limit`` the measured number and the rule's limit (None where
    the rule is not numeric), ``at`` the board position in mm.
    """

    rule: str
    severity: str
    message: str
    at: tuple[float, float]
    value: float | None = None
    limit: float | None = None
    layer: str = ""

    def to_json(self) -> dict:
        return {"rule": self.rule, "severity": self.severity, "message": self.message,
                "at": [round(self.at[0], 6), round(self.at[1], 6)],
                "value": None if self.value is None else round(self.value, 6),
                "limit": None if self.limit is None else round(self.limit, 6), "layer": self.layer}


@dataclass(frozen=True)
class CheckReport:
    """All rule results for one filter.  Truthy when clean (no errors)."""

    name: str
    results: tuple
    crossings: dict
    crossings_by_layer: dict
    min_slot_width: float | None
    min_copper_width: float | None
    units: str = "mm"
    """The spec's length unit: the table is written in it; the JSON stays in mm."""

    @property
    def findings(self) -> list[Finding]:
        return [f for r in self.results for f in r.findings]

    @property
    def errors(self) -> list[Finding]:
        return [f for f in self.findings if f.severity == "error"]

    @property
    def warnings(self) -> list[Finding]:
        return [f for f in self.findings if f.severity == "warning"]

    def __bool__(self) -> bool:
        return not self.errors

    def __len__(self) -> int:
        return len(self.findings)

    def to_json(self) -> dict:
        return {
            "filter": self.name,
            "units": {"length": "mm", "area": "mm2", "spec": self.units},
            "crossings": self.crossings,
            "crossings_by_layer": self.crossings_by_layer,
            "min_slot_width": _round(self.min_slot_width),
            "min_copper_width": _round(self.min_copper_width),
            "summary": {"errors": len(self.errors), "warnings": len(self.warnings)},
            "rules": [{"rule": r.rule, "checked": r.checked,
                       "errors": sum(f.severity == "error" for f in r.findings),
                       "warnings": sum(f.severity == "warning" for f in r.findings),
                       "worst": _round(r.worst), "limit": _round(r.limit), "unit": r.unit, "note": r.note}
                      for r in self.results],
            "findings": [f.to_json() for f in self.findings],
        }

    def format_table(self) -> str:
        """Terminal table grouped by rule: checked, errors, warnings, worst value against the limit; lengths,
        areas and positions in the spec's units."""
        lines = [f"{self.name}: crossings P={self.crossings['P']} N={self.crossings['N']}, "
                 f"min slot {self._show(self.min_slot_width, 'mm')}, "
                 f"min copper {self._show(self.min_copper_width, 'mm')}",
                 f"  {'rule':<18} {'checked':>7} {'errors':>6} {'warn':>5}  {'worst':>12} {'limit':>12}  status"]
        for r in self.results:
            errors = sum(f.severity == "error" for f in r.findings)
            warnings = len(r.findings) - errors
            status = "FAIL" if errors else ("warn" if warnings else ("pass" if r.checked else "n/a"))
            lines.append(f"  {r.rule:<18} {r.checked:>7} {errors:>6} {warnings:>5}  {self._show(r.worst, r.unit):>12} "
                         f"{self._show(r.limit, r.unit):>12}  {status}" + (f"  ({r.note})" if r.note else ""))
        for f in self.findings:
            x, y = (in_units(c, self.units) for c in f.at)
            lines.append(f"  {f.severity.upper():<7} {f.rule}: {f.message} at ({x:.6g}, {y:.6g}) {self.units}")
        return "\n".join(lines)

    def _show(self, value, unit: str) -> str:
        """A table value with its unit; mm and mm2 are turned into the spec's units."""
        if value is None:
            return "-"
        if unit in ("mm", "mm2"):
            return format_length(value, self.units, power=2 if unit == "mm2" else 1)
        return f"{_fmt(value)} {unit}".strip()


def _round(value):
    return None if value is None else round(float(value), 6)


def _fmt(value) -> str:
    return "-" if value is None else f"{value:.4g}"


def run_checks(layout, context=None, estimate=None) -> CheckReport:
    """Run every rule on a layout; ``context`` adds board copper, outline and stack-up (default: from the spec)."""
    from dataclasses import replace

    from .context import context_from_spec
    from .rules import RULE_FUNCTIONS

    ctx = context if context is not None else context_from_spec(layout.spec)
    if estimate is not None:
        ctx = replace(ctx, estimate=estimate)
    results = tuple(rule(layout, ctx) for rule in RULE_FUNCTIONS)
    by_layer = {cut.layer: {pol: len(layout.full_crossings(cut.layer, pol)) for pol in ("P", "N")}
                for cut in layout.cuts}
    worst = {r.rule: r.worst for r in results}
    return CheckReport(
        name=layout.spec.name,
        results=results,
        crossings=dict(by_layer[layout.cuts[0].layer]),
        crossings_by_layer=by_layer,
        min_slot_width=worst["slot-width"],
        min_copper_width=worst["copper-width"],
        units=layout.spec.units,
    )
