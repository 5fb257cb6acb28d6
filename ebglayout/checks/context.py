"""What every rule shares: the ``CheckContext`` it reads beside the Layout (board copper, plane outline,
stack-up, notch estimate), the ``RuleResult`` it returns, and ``shown`` for lengths in its messages.
"""
from __future__ import annotations

from dataclasses import dataclass, field

from shapely.geometry import Polygon

from ..layout import Layout
from ..spec import FilterSpec, TrackObstacle, ViaObstacle
from ..units import format_length
from . import Finding


@dataclass
class RuleResult:
    """Outcome of one rule: how many places it looked at, what it found, and the worst value against its limit."""

    rule: str
    checked: int = 0
    findings: list[Finding] = field(default_factory=list)
    worst: float | None = None
    limit: float | None = None
    unit: str = ""
    note: str = ""

    def add(self, severity: str, message: str, at, value=None, limit=None, layer: str = "") -> None:
        self.findings.append(Finding(self.rule, severity, message, (float(at[0]), float(at[1])), value, limit, layer))

    def see(self, value: float, lower_is_worse: bool = True) -> None:
        if self.worst is None or (value < self.worst if lower_is_worse else value > self.worst):
            self.worst = value


@dataclass(frozen=True)
class CheckContext:
    """What the checks know beyond the layout: other copper, the plane outline, the stack-up, the notch estimate.

    ``sandwiched`` is True when the pair's layer has a plane on each side (from the
    board stack-up), False when it has one, None when unknown (spec only).
    """

    tracks: tuple[TrackObstacle, ...] = ()
    vias: tuple[ViaObstacle, ...] = ()
    plane_outline: Polygon | None = None
    sandwiched: bool | None = None
    references: dict[str, tuple[str, ...]] | None = None
    """Signal layer -> plane layers it is referenced to; None = infer from layer names."""
    copper_layers: tuple[str, ...] | None = None
    """The board's copper layers top to bottom; None = KiCad's order by name (F.Cu, In1.Cu..In30.Cu, B.Cu)."""
    pair_planes: tuple[str, ...] | None = None
    """The board's nearest planes (any net) above and below the pair, under the pair; None = no board."""
    estimate: object = None
    """The notch estimate (ebglayout.estimate), when one was made."""


def context_from_spec(spec: FilterSpec) -> CheckContext:
    outline = Polygon(spec.plane_outline) if spec.plane_outline else None
    return CheckContext(tracks=spec.track_obstacles, vias=spec.via_obstacles, plane_outline=outline)


def shown(layout: Layout, mm: float, power: int = 1, sign: bool = False) -> str:
    """A length (``power`` 2: an area) in the spec's units, with the unit written: text for people."""
    return format_length(mm, layout.spec.units, power=power, sign=sign)
