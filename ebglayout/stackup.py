"""The complete stack-up around a cut: for each cut plane, the pair's dielectric and the cavity's.

The physics readers (the notch model, the full-wave model) need more than the
cavity's er and h: the pair's height over each cut plane sets how strongly the
traces couple to the cells, and the loss tangent sets how deep a notch can get.
``stackup_of`` gathers those values from a spec and says where each came from,
so a report can tell a value the user gave from a default or a board's value.
"""
from __future__ import annotations

from dataclasses import dataclass

from .spec import FilterSpec


@dataclass(frozen=True)
class Dielectric:
    """One dielectric slab: thickness (mm), relative permittivity and loss tangent."""

    h: float
    er: float
    tan_d: float


@dataclass(frozen=True)
class CutPlaneStack:
    """The dielectrics on both sides of one cut plane."""

    layer: str
    pair: Dielectric
    """Between the pair's layer and this cut plane."""
    cavity: Dielectric
    """Between this cut plane and the next plane beyond it, away from the pair."""


@dataclass(frozen=True)
class Stackup:
    """Per cut plane (in plane.layers order; two entries = stripline) and where each value came from."""

    planes: tuple[CutPlaneStack, ...]
    sources: tuple[tuple[str, str], ...]

    @property
    def stripline(self) -> bool:
        return len(self.planes) == 2

    def source(self, key: str) -> str:
        return dict(self.sources)[key]

    def to_json(self) -> dict:
        return {
            "planes": [{"layer": p.layer,
                        "pair": {"h_mm": p.pair.h, "er": p.pair.er, "tan_d": p.pair.tan_d},
                        "cavity": {"h_mm": p.cavity.h, "er": p.cavity.er, "tan_d": p.cavity.tan_d}}
                       for p in self.planes],
            "sources": dict(self.sources),
        }


STACKUP_KEYS = ("stackup.er", "stackup.h", "stackup.pair_h", "stackup.pair_er", "stackup.tan_d")
_DEFAULT_REASON = {
    "stackup.pair_h": "default: stackup.h",
    "stackup.pair_er": "default: stackup.er",
    "stackup.tan_d": "default: common practice for FR-4-class laminates",
}


def stackup_of(spec: FilterSpec, board_keys: frozenset[str] = frozenset()) -> Stackup:
    """The stack-up a spec describes; ``board_keys`` are the stackup keys whose values came from a board."""
    cavity = Dielectric(spec.h, spec.er, spec.tan_d)
    planes = tuple(CutPlaneStack(layer, Dielectric(h, spec.pair_er, spec.tan_d), cavity)
                   for layer, h in zip(spec.plane_layers, spec.pair_h))
    given = spec.echo.get("stackup", {}) if isinstance(spec.echo.get("stackup"), dict) else {}
    sources = []
    for key in STACKUP_KEYS:
        if key in board_keys:
            sources.append((key, "board"))
        elif key.split(".", 1)[1] in given:
            sources.append((key, "spec"))
        else:
            sources.append((key, _DEFAULT_REASON[key]))
    return Stackup(planes, tuple(sources))
