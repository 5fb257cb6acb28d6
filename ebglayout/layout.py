"""The layout object and the one pipeline that builds it.

``build_layout(spec)`` runs path -> placement (or fold) -> cell builders ->
board polygons -> traces and returns a frozen ``Layout``, which measures its
slot crossings on first use (``Layout.crossings``).  Checks,
estimates and every exporter read this object; none of them re-derives geometry.
All polygons are valid shapely geometries on the 1 nm grid with sharp corners.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import shapely
from shapely.geometry import LineString, MultiPolygon, Polygon
from shapely.ops import unary_union

from .cells import BUILDERS
from .crossing import Crossing, SlotIndex, find_crossings
from .fold import Turn, fold
from .path import offset_pieces, polyline_of, validate_centre_line
from .physics import C0
from .placement import place_row
from .spec import Arc, FilterSpec, Line
from .stackup import Stackup, stackup_of
from .units import GRID_MM, on_grid

ROLES = ("slot", "patch", "bridge", "outline")
"""Per plane layer: copper removed, patch copper, bridge copper, and the cut's outer edge."""


@dataclass(frozen=True)
class PlacedCell:
    """One cell in board coordinates."""

    index: int
    centre: tuple[float, float]
    rotation_deg: float
    size: tuple[float, float]
    patch: Polygon
    bridges: tuple[Polygon, ...]
    outer: Polygon
    slot: tuple[Polygon, ...] = ()
    """The cell's slot pieces, cut in the cell's own frame before turning (bridged cells only; see
    ``_placed_cells``)."""


@dataclass(frozen=True)
class PlaneCut:
    """What one plane layer gets: the four role geometries."""

    layer: str
    slot: MultiPolygon
    patch: MultiPolygon
    bridge: MultiPolygon
    outline: MultiPolygon

    def role(self, name: str) -> MultiPolygon:
        return getattr(self, name)

    @cached_property
    def slot_index(self) -> SlotIndex:
        """Spatial indexes of the slot edges, copper bodies and patch corners, built once per cut for all traces."""
        return SlotIndex(self)


@dataclass(frozen=True)
class Trace:
    """One trace of the pair: its centre-line and its copper polygon."""

    polarity: str
    net: str
    layer: str
    width: float
    centreline: LineString
    polygon: Polygon


@dataclass(frozen=True)
class Layout:
    """Everything the engine built for one filter."""

    spec: FilterSpec
    cells: tuple[PlacedCell, ...]
    cuts: tuple[PlaneCut, ...]
    traces: tuple[Trace, Trace]
    centreline: LineString
    route: tuple[Line | Arc, ...]
    route_generated: bool
    turns: tuple[Turn, ...]

    def cut(self, layer: str) -> PlaneCut:
        return next(c for c in self.cuts if c.layer == layer)

    def trace(self, polarity: str) -> Trace:
        return next(t for t in self.traces if t.polarity == polarity)

    @cached_property
    def crossings(self) -> tuple[Crossing, ...]:
        """Every piece of a trace inside a slot, per cut and trace, measured on first use from the fields above.

        Derived, not stored: a layout given other traces or cuts (``with_copper``) measures them afresh.
        """
        return tuple(c for cut in self.cuts for t in self.traces
                     for c in find_crossings(t.centreline, t.polarity, t.width, cut, self.centreline))

    def full_crossings(self, layer: str, polarity: str) -> list[Crossing]:
        return [c for c in self.crossings if c.layer == layer and c.polarity == polarity and c.kind == "full"]

    @property
    def stackup(self) -> Stackup:
        """The dielectrics around each cut plane, for the physics readers."""
        return stackup_of(self.spec, self.spec.stackup_from_board)


def as_multipolygon(geom) -> MultiPolygon:
    """Snap to the grid, keep only areas, and return a normalised MultiPolygon (stable vertex order)."""
    geom = on_grid(geom)
    polys: list[Polygon] = []
    for part in getattr(geom, "geoms", [geom]):
        if isinstance(part, Polygon) and not part.is_empty:
            polys.append(part)
        elif isinstance(part, MultiPolygon):
            polys.extend(part.geoms)
    return shapely.normalize(MultiPolygon(polys))


def _placed_cells(spec: FilterSpec, placements) -> list[PlacedCell]:
    """Each placement's cell shape turned and moved onto the board, all cells of one size in one array step."""
    builder = BUILDERS[spec.style]
    centres = np.round(np.array([cp.centre for cp in placements], dtype=float).reshape(-1, 2) / GRID_MM) * GRID_MM
    turns = np.array([(math.cos(cp.heading), math.sin(cp.heading)) for cp in placements]).reshape(-1, 2)
    placed: dict[int, tuple] = {}
    for size in dict.fromkeys(cp.size for cp in placements):
        rows = [k for k, cp in enumerate(placements) if cp.size == size]
        shape = builder(spec, size)
        pieces = _slot_pieces(shape)
        roles = [place_polygons(g, centres[rows], turns[rows]) for g in (shape.patch, shape.outer, *shape.bridges)]
        slots = [place_polygons(g, centres[rows], turns[rows]) for g in pieces]
        for j, k in enumerate(rows):
            placed[k] = (tuple(role[j] for role in roles), tuple(piece[j] for piece in slots))
    return [PlacedCell(index=cp.index, centre=tuple(centres[k].tolist()), rotation_deg=cp.rotation_deg, size=cp.size,
                       patch=placed[k][0][0], bridges=tuple(placed[k][0][2:]), outer=placed[k][0][1],
                       slot=placed[k][1])
            for k, cp in enumerate(placements)]


def _slot_pieces(shape) -> list[Polygon]:
    """A bridged cell's slot cut in its own frame: outer edge minus patch and bridges.

    Each vertex is turned and rounded to the grid on its own, so a bridge end lying on the middle of the outer
    edge (or of a pocket's floor) can land a fraction of a grid step off that edge once turned, leaving a sliver
    of slot that cuts the bridge off.  Cut before turning, the slot's corners at a bridge are the bridge's own
    corners and land where the bridge's do.  Cells without bridges have no such junction: none returned."""
    if not shape.bridges:
        return []
    cut = shape.outer.difference(unary_union([shape.patch, *shape.bridges]))
    return [g for g in getattr(cut, "geoms", [cut]) if isinstance(g, Polygon) and not g.is_empty]


def place_polygons(poly: Polygon, centres: np.ndarray, turns: np.ndarray) -> np.ndarray:
    """A local cell polygon turned by each heading and moved to each centre, on the 1 nm grid.

    ``centres`` (n, 2) and ``turns`` (n, 2) = (cos, sin) of the headings; one polygon per placement.
    """
    cos, sin = turns[:, :1], turns[:, 1:]
    rings = []
    for ring in (poly.exterior, *poly.interiors):
        u, v = np.asarray(ring.coords).T
        x = centres[:, :1] + u * cos - v * sin
        y = centres[:, 1:] + u * sin + v * cos
        rings.append(shapely.linearrings(np.round(np.stack([x, y], axis=-1) / GRID_MM) * GRID_MM))
    holes = np.stack(rings[1:], axis=1) if len(rings) > 1 else None
    return shapely.polygons(rings[0], holes=holes)


def build_layout(spec: FilterSpec) -> Layout:
    """The whole engine: spec in, layout out.  Raises SpecError/PlacementError on what cannot be built."""
    centre_line = validate_centre_line(spec.path, spec.trace_offset, spec.pair_width)
    turns: tuple[Turn, ...] = ()
    route, generated = spec.path, False
    if spec.style == "folded":
        folded = fold(spec, centre_line)
        placements, route, turns, generated = folded.cells, folded.pieces, folded.turns, folded.generated
        if generated:
            centre_line = validate_centre_line(route, spec.trace_offset, spec.pair_width)
    else:
        placements = place_row(spec, centre_line)

    cells = _placed_cells(spec, placements)

    patch = as_multipolygon(_union([c.patch for c in cells]))
    bridge = as_multipolygon(_union([b for c in cells for b in c.bridges]))
    outline = as_multipolygon(_union([c.outer for c in cells]))
    if bridge.is_empty:
        slot = as_multipolygon(outline.difference(patch))
    else:
        slot = as_multipolygon(_union([piece for c in cells for piece in c.slot]))
    cuts = tuple(PlaneCut(layer, slot, patch, bridge, outline) for layer in spec.plane_layers)

    centre = polyline_of(route)
    traces = tuple(_trace(spec, route, polarity) for polarity in ("P", "N"))
    return Layout(spec, tuple(cells), cuts, traces, centre, route, generated, turns)


def _union(polygons: list[Polygon]):
    """Union of cell polygons; when none touches another (the usual row of separate cells) they are only collected."""
    if len(polygons) > 1:
        tree = shapely.STRtree(polygons)
        first, second = tree.query(polygons, predicate="intersects")
        if (first != second).any():
            return unary_union(polygons)
    return MultiPolygon(polygons)


def _trace(spec: FilterSpec, route: tuple[Line | Arc, ...], polarity: str) -> Trace:
    sign = 1.0 if polarity == "P" else -1.0
    net = spec.nets[0] if polarity == "P" else spec.nets[1]
    return trace_from_line(polarity, net, spec.pair_layer, spec.pair_width, offset_pieces(route, sign * spec.trace_offset))


def effective_permittivity(spec: FilterSpec) -> float:
    """Permittivity that sets the delay of the traces: er for stripline, a rough microstrip value otherwise.

    Uses the pair's dielectric (stackup.pair_er).  Microstrip: (er + 1) / 2 is the thin-strip limit of the quasi-static
    effective permittivity (Hammerstad and Jensen, 1980; value from memory).
    """
    return spec.pair_er if len(spec.plane_layers) == 2 else (spec.pair_er + 1) / 2


def skew_ps(length_mm: float, er_eff: float) -> float:
    """Delay of ``length_mm`` of line at ``er_eff``: t = L * sqrt(er_eff) / c."""
    return abs(length_mm) * 1e-3 * math.sqrt(er_eff) / C0 * 1e12


def with_copper(layout: Layout, traces: tuple[Trace, ...] | None = None,
                cuts: tuple[PlaneCut, ...] | None = None) -> Layout:
    """The same layout with other traces and/or cuts (as read from a board); its crossings are measured afresh."""
    from dataclasses import replace

    traces = traces if traces is not None else layout.traces
    cuts = cuts if cuts is not None else layout.cuts
    return replace(layout, traces=traces, cuts=cuts)


def trace_from_line(polarity: str, net: str, layer: str, width: float, line: LineString) -> Trace:
    """A trace given by its own centre-line (e.g. chained from board tracks)."""
    polygon = line.buffer(width / 2, cap_style="flat", join_style="mitre", mitre_limit=100.0)
    return Trace(polarity, net, layer, width, on_grid(line), max(as_multipolygon(polygon).geoms, key=lambda p: p.area))
