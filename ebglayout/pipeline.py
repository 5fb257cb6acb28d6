"""The one pipeline the CLI and the KiCad plugin share: spec -> layout -> checks -> estimate -> files.

Files of one filter: <name>.dxf, .gds, .svg, .png, .kicad_mod (KiCad 6 footprint,
loads in 6 to 9), .kicad_dru (the custom rule that makes KiCad's fill exact) and
report.json.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from .checks import CheckReport, run_checks
from .layout import Layout, build_layout
from .outputs import StagedOutputs
from .report import report_data, to_json_text
from .spec import FilterSpec

OUTPUT_SUFFIXES = (".dxf", ".gds", ".svg", ".png", ".kicad_mod", ".kicad_dru")


@dataclass(frozen=True)
class FilterResult:
    layout: Layout
    checks: CheckReport
    estimate: object

    @property
    def name(self) -> str:
        return self.layout.spec.name


def make_filter(spec: FilterSpec, context=None) -> FilterResult:
    """Build, check and estimate one filter; nothing is written."""
    from .estimate.band import estimate_layout

    layout = build_layout(spec)
    estimate = estimate_layout(layout)
    checks = run_checks(layout, context, estimate=estimate)
    return FilterResult(layout, checks, estimate)


def output_names(name: str) -> list[str]:
    return [name + s for s in OUTPUT_SUFFIXES] + ["report.json"]


def write_filter(result: FilterResult, staged: StagedOutputs, report_name: str = "report.json") -> None:
    """Write every format of one filter into a staging set (moved into place when the caller's block ends)."""
    from .export.dxf import write_dxf
    from .export.gds import write_gds
    from .export.preview import write_preview
    from .kicad.footprint import footprint_text
    from .kicad.rules import rules_text

    name = result.name
    findings = result.checks.findings
    notch = result.estimate.to_json() if result.estimate is not None else None
    write_dxf(result.layout, staged.path(name + ".dxf"), findings=findings)
    write_gds(result.layout, staged.path(name + ".gds"))
    write_preview(result.layout, staged.path(name + ".svg"), staged.path(name + ".png"), findings=findings, notch=notch)
    staged.write_text(name + ".kicad_mod", footprint_text(result.layout))
    staged.write_text(name + ".kicad_dru", rules_text(result.layout))
    staged.write_text(report_name, to_json_text(report_data(result.layout, result.checks, result.estimate)))


def build_to_folder(spec: FilterSpec, out_dir: Path, force: bool = False, context=None) -> FilterResult:
    """`ebglayout build`: all outputs of one spec into ``out_dir``, all or nothing."""
    staged = StagedOutputs(out_dir, force=force)
    staged.require_free(output_names(spec.name))
    result = make_filter(spec, context)
    with staged:
        write_filter(result, staged)
    return result
