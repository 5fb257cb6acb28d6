"""GDSII export with gdstk: one top cell, one layer/datatype per plane layer and role, plus the traces.

Units: user unit 1 mm (``unit=1e-3`` m) and database unit 1 nm (``precision=1e-9`` m),
so the engine's 1 nm grid is stored exactly.  GDSII boundaries cannot have holes,
so a polygon with holes is written as gdstk's keyhole polygon (holes joined to the
outside by zero-width cuts), which fills exactly the same area.
"""
from __future__ import annotations

import datetime
from pathlib import Path

import gdstk
from shapely.geometry import Polygon

from ..layout import ROLES, Layout
from ..spec import FilterSpec
from ..units import GRID_MM
from . import atomic_path

UNIT_M = 1e-3
PRECISION_M = 1e-9
FROZEN_TIMESTAMP = datetime.datetime(2000, 1, 1, 0, 0, 0)
"""Stored as the library's modification/access time so two writes give the same bytes."""
MAX_POINTS = 199
"""Longest boundary written; gdstk fractures longer ones (199 keeps within the classic GDSII limit of 200)."""
TRACE_ROLE = "trace"


def default_gds_layers(spec: FilterSpec) -> dict[str, tuple[int, int]]:
    """Our default map: plane i (0-based) gets layers 10*(i+1)+1..+4 for slot, patch, bridge, outline; traces layer 1.

    For a stripline on In2.Cu between In1.Cu and In3.Cu: "In1.Cu/slot" -> (11, 0),
    "In3.Cu/outline" -> (24, 0), "In2.Cu/trace" -> (1, 0).
    """
    layers = {f"{spec.pair_layer}/{TRACE_ROLE}": (1, 0)}
    for i, plane in enumerate(spec.plane_layers):
        for k, role in enumerate(ROLES):
            layers[f"{plane}/{role}"] = (10 * (i + 1) + k + 1, 0)
    return layers


def gds_layers(spec: FilterSpec) -> dict[str, tuple[int, int]]:
    """The default map overridden by the spec's ``gds`` table."""
    layers = default_gds_layers(spec)
    for name, layer, datatype in spec.gds_layers or ():
        layers[name] = (layer, datatype)
    return layers


def hole_free(poly: Polygon, layer: int, datatype: int) -> list[gdstk.Polygon]:
    """GDSII boundaries for one shapely polygon: as is, or keyholed when it has holes (same filled area)."""
    outer = gdstk.Polygon(poly.exterior.coords[:-1], layer=layer, datatype=datatype)
    if not poly.interiors:
        return [outer]
    holes = [gdstk.Polygon(ring.coords[:-1]) for ring in poly.interiors]
    return gdstk.boolean(outer, holes, "not", precision=GRID_MM, layer=layer, datatype=datatype)


def build_library(layout: Layout) -> gdstk.Library:
    """The gdstk library for ``layout``: cuts in spec layer order, roles in ROLES order, then P and N traces."""
    spec = layout.spec
    layers = gds_layers(spec)
    lib = gdstk.Library(name=spec.name, unit=UNIT_M, precision=PRECISION_M)
    cell = lib.new_cell(spec.name)
    for cut in layout.cuts:
        for role in ROLES:
            layer, datatype = layers[f"{cut.layer}/{role}"]
            for poly in cut.role(role).geoms:
                cell.add(*hole_free(poly, layer, datatype))
    layer, datatype = layers[f"{spec.pair_layer}/{TRACE_ROLE}"]
    for trace in layout.traces:
        cell.add(*hole_free(trace.polygon, layer, datatype))
    return lib


def write_gds(layout: Layout, path: str | Path) -> Path:
    """Write the layout as GDSII to ``path`` (atomically, byte-stable) and return the path."""
    path = Path(path)
    lib = build_library(layout)
    with atomic_path(path) as tmp:
        lib.write_gds(tmp, max_points=MAX_POINTS, timestamp=FROZEN_TIMESTAMP)
    return path
