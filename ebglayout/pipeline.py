"""The one pipeline the CLI and the KiCad plugin share: spec -> layout -> checks -> estimate -> files.

Files of one filter: <name>.dxf, .gds, .svg, .png, .kicad_mod (KiCad 6 footprint,
loads in 6 to 9), .kicad_dru (the custom rule that makes KiCad's fill exact) and
<name>.report.json (named after the filter, so filters can share a folder).
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

OUTPUT_SUFFIXES = (".dxf", ".gds", ".svg", ".png", ".kicad_mod", ".kicad_dru", ".report.json")


@dataclass(frozen=True)
class FilterResult:
    layout: Layout
    checks: CheckReport
    estimate: object
    context: object = None
    """The CheckContext the checks ran with (a board's other copper), when one was given."""

    @property
    def name(self) -> str:
        return self.layout.spec.name


def make_filter(spec: FilterSpec, context=None) -> FilterResult:
    """Build, check and estimate one filter; nothing is written."""
    from .estimate.band import estimate_layout

    layout = build_layout(spec)
    estimate = estimate_layout(layout)
    checks = run_checks(layout, context, estimate=estimate)
    return FilterResult(layout, checks, estimate, context)


def output_names(name: str, folder: str = "") -> list[str]:
    """The names ``write_filter`` writes for filter ``name`` (under ``folder``, a sub-folder of the run's)."""
    return [f"{folder}/{name}{s}" if folder else name + s for s in OUTPUT_SUFFIXES]


PARALLEL_DXF_CELLS = 200
"""From this many cells up, ``write_filter`` with ``jobs`` > 1 writes the DXF (the slowest format, ezdxf spends
about 0.1 ms per entity) in a forked process while this one writes the others."""


def write_filter(result: FilterResult, staged: StagedOutputs, folder: str = "", jobs: int = 1) -> None:
    """Write every format of one filter into a staging set, under its sub-folder ``folder`` if given (moved into
    place when the caller's block ends).

    ``jobs`` > 1 (the CLI; never the KiCad plugin) lets a large filter's DXF be
    written by a forked child in parallel; should the child fail, the DXF is
    written here, so an error is raised as without it.
    """
    from .export.dxf import write_dxf
    from .export.gds import write_gds
    from .export.preview import build_drawing, drawing_title, write_png, write_svg
    from .kicad.footprint import footprint_text
    from .kicad.rules import rules_text

    names = dict(zip(OUTPUT_SUFFIXES, output_names(result.name, folder)))
    staged.require_free(names.values())
    findings = result.checks.findings
    notch = result.estimate.to_json() if result.estimate is not None else None

    def dxf() -> None:
        with staged.writing(names[".dxf"]) as path:
            write_dxf(result.layout, path, findings=findings)

    child = None
    if jobs > 1 and len(result.layout.cells) >= PARALLEL_DXF_CELLS and can_fork():
        staged.path(names[".dxf"])
        child = _forked(dxf)
    else:
        dxf()
    try:
        with staged.writing(names[".gds"]) as path:
            write_gds(result.layout, path)
        copper = result.context
        drawing = build_drawing(result.layout, findings, notch, tracks=copper.tracks if copper else None,
                                vias=copper.vias if copper else None)
        with staged.writing(names[".svg"]) as path:
            write_svg(drawing, drawing_title(result.layout), path)
        with staged.writing(names[".png"]) as path:
            write_png(drawing, path)
        staged.write_text(names[".kicad_mod"], footprint_text(result.layout))
        staged.write_text(names[".kicad_dru"], rules_text(result.layout))
        staged.write_text(names[".report.json"],
                          to_json_text(report_data(result.layout, result.checks, result.estimate)))
    finally:
        done = child is None or _succeeded(child)  # always waited for: no file may appear after a failure here
    if not done:
        dxf()


def usable_cpus() -> int:
    """CPUs this process may run on (its affinity where the platform tells it): the default for ``jobs``."""
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)


def can_fork() -> bool:
    """Whether work may be handed to forked processes: on Linux only (Windows has no fork; on macOS the system
    libraries numpy may load are not safe to use in a forked child)."""
    return sys.platform.startswith("linux")


def _forked(job) -> int:
    """Run ``job`` in a forked child (pid returned); the child leaves through ``os._exit`` with 0 or 1, and dies
    with this process should it be killed."""
    parent = os.getpid()
    pid = os.fork()
    if pid == 0:  # pragma: no cover - runs in the child, which never returns
        code = 1
        try:
            _die_with_parent(parent)
            job()
            code = 0
        finally:
            os._exit(code)
    return pid


PR_SET_PDEATHSIG = 1
"""prctl option (linux/prctl.h): the signal the kernel sends this process when its parent dies."""


def _die_with_parent(parent: int) -> None:
    """In a forked child: ask Linux for SIGKILL when the parent dies, so a killed run leaves no writer behind."""
    import ctypes
    import signal

    libc = ctypes.CDLL(None, use_errno=True)
    if libc.prctl(PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0) != 0 or os.getppid() != parent:
        os._exit(1)  # no guard, or the parent is already gone: write nothing


def _succeeded(pid: int) -> bool:
    return os.waitstatus_to_exitcode(os.waitpid(pid, 0)[1]) == 0


def build_to_folder(spec: FilterSpec, out_dir: Path, force: bool = False, context=None, jobs: int = 1,
                    inputs=()) -> FilterResult:
    """`ebglayout build`: all outputs of one spec into ``out_dir``, all or nothing, never over one of ``inputs``
    (``jobs``: see write_filter)."""
    with StagedOutputs(out_dir, force=force, inputs=inputs) as staged:
        staged.require_free(output_names(spec.name))
        result = make_filter(spec, context)
        write_filter(result, staged, jobs=jobs)
    return result
