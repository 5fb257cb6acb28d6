"""Where the cells go: a row of cells on one straight run of the centre-line.

Each cell is centred on the centre-line and turned to the run's heading, so both
traces cross every slot edge at 90 degrees.  The row must fit inside the run's
usable interval (where the offset traces are straight too); otherwise a
PlacementError gives the needed length and the longest run that was available.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import PlacementError
from .path import CentreLine, StraightRun
from .spec import FilterSpec
from .units import format_mm


@dataclass(frozen=True)
class CellPlacement:
    """One cell on the board: index in the row, patch centre, heading (radians) and patch size."""

    index: int
    centre: tuple[float, float]
    heading: float
    size: tuple[float, float]

    @property
    def rotation_deg(self) -> float:
        return round(math.degrees(self.heading) % 360.0, 9) % 360.0


def row_offsets(spec: FilterSpec) -> tuple[list[float], float]:
    """Patch-centre offsets from the row's start (its first outer slot edge), and the row length."""
    centres: list[float] = []
    edge = 0.0
    for i, (along, _) in enumerate(spec.patches):
        if i == 0:
            edge += spec.slot
        elif spec.web > 0:
            edge += 2 * spec.slot + spec.web
        else:
            edge += spec.slot
        centres.append(edge + along / 2)
        edge += along
    return centres, edge + spec.slot


def choose_run(spec: FilterSpec, runs: list[StraightRun], needed: float, start: float | None,
               lead: float = 0.0) -> tuple[StraightRun, float]:
    """Pick the run and the arc length where the row's first slot edge lies.

    ``lead`` is extra straight length the row needs before its first edge and
    after its last (a folded route's jogs and turns).
    """
    total = needed + 2 * lead
    if start is not None:
        for run in runs:
            lo, hi = run.usable
            if lo - 1e-9 <= start - lead and start + needed + lead <= hi + 1e-9:
                return run, start
        holder = next((r for r in runs if r.s_start <= start <= r.s_end), None)
        where = (f"the straight run there spans s = {holder.usable[0]:.4g} to {holder.usable[1]:.4g} mm"
                 if holder else "it does not fall on a straight run")
        raise PlacementError(f"cut.start = {format_mm(start)}: the row needs {format_mm(total)} of straight path "
                             f"from s = {start - lead:.4g} mm, but {where}")
    if not runs:
        raise PlacementError(f"pair.path: has no straight run; the row needs {format_mm(total)} of straight path")
    best = max(runs, key=lambda r: (round(r.usable[1] - r.usable[0], 9), -r.s_start))
    lo, hi = best.usable
    if hi - lo + 1e-9 < total:
        raise PlacementError(
            f"pair.path: the cells need {format_mm(total)} of straight path but the longest straight run offers "
            f"{format_mm(max(hi - lo, 0.0))} (s = {lo:.4g} to {hi:.4g} mm, starting at "
            f"({best.start[0]:.4g}, {best.start[1]:.4g})); shorten the row or lengthen the run")
    return best, lo + (hi - lo - total) / 2 + lead


def place_row(spec: FilterSpec, centre_line: CentreLine) -> list[CellPlacement]:
    """Cells of a straight or bridged row, on the longest fitting run or at ``cut.start``."""
    offsets, length = row_offsets(spec)
    run, s0 = choose_run(spec, centre_line.straight_runs(), length, spec.start)
    return [CellPlacement(i, run.point_at(s0 + off), run.heading, size)
            for i, (off, size) in enumerate(zip(offsets, spec.patches))]
