"""The one pipeline the CLI and the KiCad plugin share: spec -> layout -> checks -> estimate -> files.

Files of one filter: <name>.dxf, .gds, .svg, .png, .kicad_mod (KiCad 6 footprint,
loads in 6 to 9), .kicad_dru (the custom rule that makes KiCad's fill exact) and
report.json.
"""
from __future__ import annotations

import os
import sys
from dataclasses import dataclass
from pathlib import Path

from .checks import CheckReport, run_checks
from .layout import Layout, build_layout
from .outputs import StagedOutputs
from .report import report_data, to_json_text
from .spec import FilterSpec

OUTPUT_SUFFIXES = (".dxf", ".gds", ".svg", ".png", ".kicad_mod", ".kicad_dru", ".s4p", "_response.svg",
                   "_response.png")


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
    estimate = estimate_layout(layout, model=True)
    checks = run_checks(layout, context, estimate=estimate)
    return FilterResult(layout, checks, estimate)


def output_names(name: str) -> list[str]:
    return [name + s for s in OUTPUT_SUFFIXES] + ["report.json"]


PARALLEL_DXF_CELLS = 200
"""From this many cells up, ``write_filter`` with ``jobs`` > 1 writes the DXF (the slowest format, ezdxf spends
about 0.1 ms per entity) in a forked process while this one writes the others."""


def write_filter(result: FilterResult, staged: StagedOutputs, report_name: str = "report.json", jobs: int = 1) -> None:
    """Write every format of one filter into a staging set (moved into place when the caller's block ends).

    ``jobs`` > 1 (the CLI; never the KiCad plugin) lets a large filter's DXF be
    written by a forked child in parallel; should the child fail, the DXF is
    written here, so an error is raised as without it.
    """
    from .export.dxf import write_dxf
    from .export.gds import write_gds
    from .export.preview import write_preview
    from .kicad.footprint import footprint_text
    from .kicad.rules import rules_text

    name = result.name
    findings = result.checks.findings
    notch = result.estimate.to_json() if result.estimate is not None else None
    dxf_path = staged.path(name + ".dxf")

    def dxf() -> None:
        write_dxf(result.layout, dxf_path, findings=findings)

    child = None
    if jobs > 1 and len(result.layout.cells) >= PARALLEL_DXF_CELLS and can_fork():
        child = _forked(dxf)
    else:
        dxf()
    try:
        write_gds(result.layout, staged.path(name + ".gds"))
        write_preview(result.layout, staged.path(name + ".svg"), staged.path(name + ".png"), findings=findings,
                      notch=notch)
        staged.write_text(name + ".kicad_mod", footprint_text(result.layout))
        staged.write_text(name + ".kicad_dru", rules_text(result.layout))
        staged.write_text(report_name, to_json_text(report_data(result.layout, result.checks, result.estimate)))
        _write_model(result, staged, notch)
    finally:
        done = child is None or _succeeded(child)  # always waited for: no file may appear after a failure here
    if not done:
        dxf()


def _write_model(result: FilterResult, staged: StagedOutputs, notch: dict | None) -> None:
    """The circuit model's 4-port (.s4p) and its Scc21/Sdd21 plot, when the estimate carries the model."""
    rejection = getattr(result.estimate, "rejection", None)
    if rejection is None:
        return
    from .estimate.network import SOURCE
    from .estimate.rejection import MODEL_CAUTION
    from .export.response_plot import write_response_plot
    from .sparams import write_touchstone

    name = result.name
    write_touchstone(rejection.network, staged.path(name + ".s4p"),
                     [f"{SOURCE}, filter {name}", "nominal stack-up; " + MODEL_CAUTION])
    write_response_plot(notch["model"], staged.path(name + "_response.svg"), staged.path(name + "_response.png"),
                        name=name)


def usable_cpus() -> int:
    """CPUs this process may run on (its affinity where the platform tells it): the default for ``jobs``."""
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)


def can_fork() -> bool:
    """Whether work may be handed to forked processes: on Linux only (Windows has no fork; on macOS the system
    libraries numpy may load are not safe to use in a forked child)."""
    return sys.platform.startswith("linux")


def _forked(job) -> int:
    """Run ``job`` in a forked child (pid returned); the child leaves through ``os._exit`` with 0 or 1."""
    pid = os.fork()
    if pid == 0:  # pragma: no cover - runs in the child, which never returns
        code = 1
        try:
            job()
            code = 0
        finally:
            os._exit(code)
    return pid


def _succeeded(pid: int) -> bool:
    return os.waitstatus_to_exitcode(os.waitpid(pid, 0)[1]) == 0


def build_to_folder(spec: FilterSpec, out_dir: Path, force: bool = False, context=None, jobs: int = 1) -> FilterResult:
    """`ebglayout build`: all outputs of one spec into ``out_dir``, all or nothing (``jobs``: see write_filter)."""
    staged = StagedOutputs(out_dir, force=force)
    staged.require_free(output_names(spec.name))
    result = make_filter(spec, context)
    with staged:
        write_filter(result, staged, jobs=jobs)
    return result
