"""Layout + Stackup -> an engine-independent full-wave description: sheets, slabs, ports and mesh lines.

Everything comes from the built Layout (the cut plane polygons as drawn, the traces as routed) and its Stackup;
nothing is re-derived from the spec.  The model works in its own frame: the board turned so that the cells' row
runs along +x and the pair's centre line at the first cell lies on y = 0 (the symmetry plane when there is one).
Lengths are mm.  Copper is a perfect conductor of zero thickness (lossless copper, no roughness); dielectrics
are lossy through a conductivity fitted at one frequency (see ``Slab.kappa``).

Plane and cavity, microstrip (z up):  solid plane (z = -h, domain wall) | cavity | cut plane (z = 0) | pair
dielectric | traces (z = pair_h) | air.  Stripline: the second cut plane and its cavity mirror the first above
the traces, and the second solid plane is the top wall.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
import shapely
from shapely import affinity
from shapely.geometry import LineString, MultiPolygon, Point, Polygon, box
from shapely.ops import unary_union

from ..errors import EbgError
from ..layout import Layout
from ..physics import C0, EPS0
from ..stackup import Stackup

PORT_PAD_CELLS = 5.0
"""Plane and dielectric continue this many pair heights beyond each port, so no port sits in the absorbing wall."""
MIN_LEAD_MM = 0.3
"""Shortest plain line allowed between a port and the cut."""
EDGE_TOL = 1e-6
"""Two coordinates closer than this (mm) are the same mesh line."""


@dataclass(frozen=True)
class Preset:
    """Accuracy preset: mesh density and the end of the time record."""

    name: str
    slot_cells: int
    """Cells across the narrowest slot."""
    max_cell_wavelengths: float
    """Largest cell as a fraction of the shortest wavelength in the densest dielectric."""
    trace_cells: int
    """Cells across each trace (thirds rule at its edges)."""
    slab_cells: int
    """Cells through each dielectric slab."""
    end_db: float
    """Stop when the field energy has fallen this far below its peak."""
    max_time_ns: float
    """Longest record: lossy cavities ring for nanoseconds."""
    lead_mm: float
    """Plain line between each port and the cut."""


PRESETS = {
    "fast": Preset("fast", slot_cells=2, max_cell_wavelengths=1 / 12, trace_cells=2, slab_cells=2, end_db=-30.0,
                   max_time_ns=4.0, lead_mm=1.5),
    "default": Preset("default", slot_cells=3, max_cell_wavelengths=1 / 16, trace_cells=3, slab_cells=3,
                      end_db=-40.0, max_time_ns=8.0, lead_mm=2.0),
    "fine": Preset("fine", slot_cells=4, max_cell_wavelengths=1 / 24, trace_cells=4, slab_cells=4, end_db=-50.0,
                   max_time_ns=16.0, lead_mm=2.0),
}


@dataclass(frozen=True)
class Sheet:
    """A zero-thickness copper sheet (perfect conductor) at height z: hole-free polygons."""

    name: str
    z: float
    polygons: tuple[Polygon, ...]


@dataclass(frozen=True)
class Slab:
    """A dielectric slab filling the domain in x and y between z0 and z1."""

    name: str
    z0: float
    z1: float
    er: float
    tan_d: float

    def kappa(self, f_hz: float) -> float:
        """Conductivity (S/m) giving this loss tangent at f_hz: kappa = 2 pi f eps0 er tan_d (exact only at f_hz)."""
        return 2 * math.pi * f_hz * EPS0 * self.er * self.tan_d


@dataclass(frozen=True)
class Feed:
    """One lumped element from a reference plane (z_plane) to a trace (z_trace) across the trace end at x."""

    x: float
    y0: float
    y1: float
    z_plane: float
    z_trace: float
    resistance: float


@dataclass(frozen=True)
class Port:
    """One single-ended terminal: 1 P near, 2 N near, 3 P far, 4 N far.  Its voltage is the feeds' mean,
    its current (into the trace) their sum."""

    number: int
    polarity: str
    end: str
    feeds: tuple[Feed, ...]


@dataclass(frozen=True)
class Model:
    """The full-wave description of one layout in the model frame (see the module docstring)."""

    name: str
    preset: Preset
    domain: tuple[float, float, float, float, float, float]
    boundaries: tuple[str, str, str, str, str, str]
    """xmin, xmax, ymin, ymax, zmin, zmax: "PEC", "PMC", "MUR" or "PML_8"."""
    sheets: tuple[Sheet, ...]
    slabs: tuple[Slab, ...]
    traces: dict = field(hash=False, compare=False)
    """polarity -> the trace polygon as clipped to the model (the copper the ports must connect)."""
    ports: tuple[Port, ...] = ()
    mesh: tuple[np.ndarray, np.ndarray, np.ndarray] = field(default=(), hash=False, compare=False)
    slot_edges: tuple[tuple[str, float], ...] = ()
    """("x" | "y", coordinate) of every axis-aligned slot edge: each must be a mesh line."""
    slot_width: float = 0.0
    """Narrowest slot and trace (mm): they set the finest cells."""
    trace_width: float = 0.0
    f_max_hz: float = 0.0
    f_kappa_hz: float = 0.0
    """Frequency at which each slab's conductivity gives its loss tangent."""
    symmetric_across: bool = False
    """Cut and pair mirror-symmetric about y = 0 (half domain possible)."""
    symmetric_along: bool = False
    """Cut and pair mirror-symmetric about the middle x (far-end excitations follow from near-end ones)."""
    half: str = ""
    """"" = full domain; "even" / "odd" = half domain y >= 0 with a magnetic / electric wall at y = 0."""
    frame: tuple[float, float, float] = (0.0, 0.0, 0.0)
    """(angle_deg, x0, y0): board point (x0, y0) is the model origin, the board turned by -angle_deg."""

    @property
    def cells(self) -> int:
        return int(np.prod([len(m) - 1 for m in self.mesh]))

    def port(self, number: int) -> Port:
        return next(p for p in self.ports if p.number == number)


def build_model(layout: Layout, preset: str | Preset = "default", f_max_hz: float | None = None,
                port_ohm: float | None = None, with_cut: bool = True) -> Model:
    """The full-domain model of a layout (``half_model`` turns it into a half-domain one).  ``with_cut=False``
    gives the same pair, window and mesh over solid planes: the plain-line baseline."""
    preset = PRESETS[preset] if isinstance(preset, str) else preset
    stack: Stackup = layout.stackup
    f_max = f_max_hz or default_f_max(layout)
    angle, origin = _frame(layout)

    def local(geom):
        return _to_local(layout, geom)

    cut = layout.cuts[0]
    outline = local(cut.outline)
    ox0, oy0, ox1, oy1 = outline.bounds
    trace_polys = {t.polarity: local(t.polygon) for t in layout.traces}
    lead = _straight_lead(trace_polys, ox0, ox1, preset.lead_mm, layout.spec.pair_width)
    strip = box(ox0 - lead, -1e3, ox1 + lead, 1e3)
    near = [p.intersection(strip).bounds for p in trace_polys.values()]
    margin_y = max(1.0, 5 * max(p.pair.h + p.cavity.h for p in stack.planes))
    window = box(ox0 - lead, min([oy0] + [b[1] for b in near]) - margin_y,
                 ox1 + lead, max([oy1] + [b[3] for b in near]) + margin_y)
    traces = {pol: _single_piece(poly.intersection(window), pol) for pol, poly in trace_polys.items()}

    z_levels, slabs, planes_z = _stack(stack)
    pad = PORT_PAD_CELLS * max(p.pair.h for p in stack.planes)
    wx0, wy0, wx1, wy1 = window.bounds
    extent = box(wx0 - pad, wy0, wx1 + pad, wy1)
    sheets = []
    for k, (plane_cut, z) in enumerate(zip(layout.cuts, planes_z)):
        copper = extent.difference(local(plane_cut.slot)) if with_cut else extent
        sheets.append(Sheet(f"plane{k + 1}", z, hole_free(copper)))
    z_pair = z_levels["pair"]
    sheets.append(Sheet("traces", z_pair, tuple(p for poly in traces.values() for p in hole_free(poly))))

    zs = [z_levels["bottom"], z_levels["top"]]
    stripline = stack.stripline
    air = 0.0 if stripline else max(1.0, 8 * stack.planes[0].pair.h)
    domain = (wx0 - pad, wx1 + pad, wy0, wy1, zs[0], zs[1] + air)
    # Electric walls at both x ends tie every plane together beyond the ports (as stitching vias would): a
    # floating cut plane otherwise keeps a static charge and the field energy never decays (measured: -12 dB
    # after 3.6 ns on a plain line, against -64 dB after 0.5 ns with the walls).
    boundaries = ("PEC", "PEC", "MUR", "MUR", "PEC", "PEC" if stripline else "MUR")

    ports = _ports(layout, traces, window, planes_z, z_pair, port_ohm or 50.0)
    slot_local = local(cut.slot)
    slot_edges = tuple(sorted(set(_axis_edges(slot_local))))
    er_max = max(max(p.pair.er, p.cavity.er) for p in stack.planes)
    model = Model(name=layout.spec.name, preset=preset, domain=domain, boundaries=boundaries,
                  sheets=tuple(sheets), slabs=tuple(slabs), traces=traces, ports=tuple(ports),
                  slot_edges=slot_edges, slot_width=layout.spec.slot, trace_width=layout.spec.pair_width,
                  f_max_hz=f_max, f_kappa_hz=0.5 * f_max,
                  frame=(angle, origin[0], origin[1]))
    model = replace(model, symmetric_across=_mirrored(model, axis="y"), symmetric_along=_mirrored(model, axis="x"))
    mesh = build_mesh(model, slot_local, er_max, z_levels)
    return replace(model, mesh=mesh)


def _straight_lead(traces: dict, x0: float, x1: float, lead: float, width: float) -> float:
    """The longest lead-in up to ``lead`` at which both traces cross both window ends square (a cut across
    exactly one trace width), so every port sits on a straight piece of line; shorter where a bend is near."""
    for trial in np.arange(lead, MIN_LEAD_MM - 1e-9, -0.05):
        square = True
        for poly in traces.values():
            for x in (x0 - trial, x1 + trial):
                cut = poly.intersection(LineString([(x, -1e3), (x, 1e3)]))
                if cut.is_empty or abs(cut.length - width) > 1e-3 or cut.geom_type != "LineString":
                    square = False
        if square:
            return float(trial)
    raise EbgError(f"fullwave model: the pair is not straight within {MIN_LEAD_MM} mm of the cut's ends along the "
                   "cells' row; ports need a straight lead-in")


def default_f_max(layout: Layout) -> float:
    """Top of the simulated band: 1.6 x the estimated notch of the lowest cell (the notch sits mid-band)."""
    from ..estimate import estimate_layout

    notch = min(c.notch_hz for c in estimate_layout(layout).cells)
    return 1.6 * notch


def half_model(model: Model, mode: str) -> Model:
    """The y >= 0 half of a symmetric model with a magnetic (``even``: common mode) or electric (``odd``:
    differential mode) wall at y = 0; only the ports of the trace on the +y side remain."""
    if not model.symmetric_across:
        raise EbgError("fullwave symmetry: the cut and the pair are not mirror-symmetric about the pair's centre "
                       "line; run the full domain")
    x0, x1, _, y1, z0, z1 = model.domain
    keep = box(x0 - 1, 0.0, x1 + 1, y1 + 1)
    sheets = tuple(Sheet(s.name, s.z, tuple(q for p in s.polygons for q in hole_free(p.intersection(keep))))
                   for s in model.sheets)
    upper = {pol for pol, poly in model.traces.items() if poly.centroid.y > 0}
    ports = tuple(p for p in model.ports if p.polarity in upper)
    bounds = list(model.boundaries)
    bounds[2] = "PMC" if mode == "even" else "PEC"
    mx, my, mz = model.mesh
    my = np.unique(np.concatenate([[0.0], my[my > EDGE_TOL]]))
    return replace(model, domain=(x0, x1, 0.0, y1, z0, z1), boundaries=tuple(bounds), sheets=sheets,
                   traces={pol: model.traces[pol] for pol in upper}, ports=ports, mesh=(mx, my, mz), half=mode)


def with_port_ohm(model: Model, ohm: float) -> Model:
    """The same model with every port's feeds set to one impedance (a port of n parallel feeds: n x ohm each)."""
    ports = tuple(replace(p, feeds=tuple(replace(f, resistance=ohm * len(p.feeds)) for f in p.feeds))
                  for p in model.ports)
    return replace(model, ports=ports)


def hole_free(geom) -> tuple[Polygon, ...]:
    """Polygons without holes covering ``geom`` exactly: each holed polygon is cut into strips at its holes'
    x coordinates (the engine's polygon primitive has no holes)."""
    out: list[Polygon] = []
    for poly in getattr(geom, "geoms", [geom]):
        if not isinstance(poly, Polygon) or poly.is_empty or poly.area < 1e-12:
            continue
        if not poly.interiors:
            out.append(shapely.normalize(poly))
            continue
        x0, y0, x1, y1 = poly.bounds
        cuts = sorted({x for ring in poly.interiors for x, _ in ring.coords} | {x0, x1})
        for a, b in zip(cuts, cuts[1:]):
            if b - a > EDGE_TOL:
                out.extend(hole_free(poly.intersection(box(a, y0 - 1, b, y1 + 1))))
    return tuple(out)


def _frame(layout: Layout) -> tuple[float, tuple[float, float]]:
    """The turn and origin of the model frame: the first cell's heading, and the centre line's point nearest it."""
    first = layout.cells[0]
    on_line = layout.centreline.interpolate(layout.centreline.project(Point(first.centre)))
    return first.rotation_deg, (on_line.x, on_line.y)


def _single_piece(geom, polarity: str) -> Polygon:
    parts = [g for g in getattr(geom, "geoms", [geom]) if isinstance(g, Polygon) and not g.is_empty]
    if len(parts) != 1:
        raise EbgError(f"fullwave model: trace {polarity} enters the simulated window {len(parts)} times; the route "
                       "must cross the cut's window once")
    return parts[0]


def _stack(stack: Stackup) -> tuple[dict, list[Slab], list[float]]:
    """z of the solid planes, cut planes and traces, and the dielectric slabs between them."""
    first = stack.planes[0]
    levels = {"bottom": -first.cavity.h, "pair": first.pair.h}
    slabs = [Slab("cavity1", -first.cavity.h, 0.0, first.cavity.er, first.cavity.tan_d),
             Slab("pair1", 0.0, first.pair.h, first.pair.er, first.pair.tan_d)]
    planes_z = [0.0]
    if stack.stripline:
        second = stack.planes[1]
        z2 = first.pair.h + second.pair.h
        planes_z.append(z2)
        slabs += [Slab("pair2", first.pair.h, z2, second.pair.er, second.pair.tan_d),
                  Slab("cavity2", z2, z2 + second.cavity.h, second.cavity.er, second.cavity.tan_d)]
        levels["top"] = z2 + second.cavity.h
    else:
        levels["top"] = first.pair.h
    return levels, slabs, planes_z


def _ports(layout: Layout, traces: dict, window: Polygon, planes_z: list[float], z_pair: float,
           ohm: float) -> list[Port]:
    """Lumped ports across each trace's two ends on the window's x edges, to every cut plane in parallel."""
    x0, _, x1, _ = window.bounds
    ports = []
    for polarity, poly in traces.items():
        ends = []
        for x in (x0, x1):
            touch = poly.intersection(LineString([(x, -1e3), (x, 1e3)]))
            if touch.is_empty or touch.length < EDGE_TOL:
                raise EbgError(f"fullwave model: trace {polarity} does not reach the window edge x = {x:.4f} mm in "
                               "the model frame (the route must run along the cells' row through the cut)")
            lo, hi = touch.bounds[1], touch.bounds[3]
            feeds = tuple(Feed(x, lo, hi, z, z_pair, ohm * len(planes_z)) for z in planes_z)
            ends.append((x, feeds))
        # near end = the end closer to the start of the trace's own path
        start = Point(layout.trace(polarity).centreline.coords[0])
        start_local = _to_local(layout, start)
        ends.sort(key=lambda e: abs(e[0] - start_local.x))
        base = 1 if polarity == "P" else 2
        ports.append(Port(base, polarity, "near", ends[0][1]))
        ports.append(Port(base + 2, polarity, "far", ends[1][1]))
    return sorted(ports, key=lambda p: p.number)


def _to_local(layout: Layout, geom):
    angle, origin = _frame(layout)
    moved = affinity.translate(geom, -origin[0], -origin[1])
    return affinity.rotate(moved, -angle, origin=(0, 0), use_radians=False)


def _axis_edges(geom) -> list[tuple[str, float]]:
    """("x", x) for every edge parallel to y and ("y", y) for every edge parallel to x."""
    edges = []
    for poly in getattr(geom, "geoms", [geom]):
        for ring in (poly.exterior, *poly.interiors):
            pts = np.asarray(ring.coords)
            for (ax, ay), (bx, by) in zip(pts[:-1], pts[1:]):
                if abs(ax - bx) < EDGE_TOL:
                    edges.append(("x", round(float(ax), 9)))
                elif abs(ay - by) < EDGE_TOL:
                    edges.append(("y", round(float(ay), 9)))
    return edges


def _slanted_boxes(geom) -> list[tuple[float, float, float, float]]:
    """Bounding boxes of every edge that is neither along x nor along y (45-degree jogs, arc chords)."""
    boxes = []
    for poly in getattr(geom, "geoms", [geom]):
        for ring in (poly.exterior, *poly.interiors):
            pts = np.asarray(ring.coords)
            for (ax, ay), (bx, by) in zip(pts[:-1], pts[1:]):
                if abs(ax - bx) > EDGE_TOL and abs(ay - by) > EDGE_TOL:
                    boxes.append((min(ax, bx), min(ay, by), max(ax, bx), max(ay, by)))
    return boxes


def _mirrored(model: Model, axis: str) -> bool:
    """Whether the copper of every sheet is its own mirror image about y = 0 (axis "y") or the middle x ("x")."""
    x0, x1 = model.domain[0], model.domain[1]
    mid = 0.5 * (x0 + x1)
    for sheet in model.sheets:
        copper = unary_union(sheet.polygons)
        if axis == "y":
            image = affinity.scale(copper, 1.0, -1.0, origin=(0, 0))
        else:
            image = affinity.scale(copper, -1.0, 1.0, origin=(mid, 0))
        if copper.symmetric_difference(image).area > 1e-6:
            return False
    return True


def build_mesh(model: Model, slot: MultiPolygon, er_max: float, z_levels: dict) -> tuple[np.ndarray, ...]:
    """Mesh lines: on every copper edge along x or y, thirds rule across each trace's long edges, a uniform fine
    mesh over slanted edges (45-degree jogs, arcs), graded (ratio <= 1.5) up to a wavelength-based largest cell."""
    p = model.preset
    max_cell = C0 / model.f_max_hz / math.sqrt(er_max) * 1e3 * p.max_cell_wavelengths
    fine = model.slot_width / p.slot_cells
    trace_step = model.trace_width / p.trace_cells
    x0, x1, y0, y1, z0, z1 = model.domain

    fixed = {"x": {x0, x1}, "y": {y0, y1, 0.0}}
    for sheet in model.sheets:
        for ax, value in _axis_edges(MultiPolygon([q for q in sheet.polygons])):
            if sheet.name != "traces" or ax == "x":
                fixed[ax].add(value)
    for port in model.ports:
        fixed["x"].add(port.feeds[0].x)
    thirds = []
    for poly in model.traces.values():
        for ax, value in _axis_edges(poly):
            if ax == "y":
                inside = 1.0 if poly.contains(Point(poly.centroid.x, value + 1e-4)) else -1.0
                thirds += [value + inside * trace_step / 3, value - inside * 2 * trace_step / 3]
    fixed["y"].update(thirds)

    fine_x = [(a - fine, b + fine) for a, b in _slot_spans(slot, 0)]
    fine_y = [(a - fine, b + fine) for a, b in _slot_spans(slot, 1)]
    trace_bounds = [poly.bounds for poly in model.traces.values()]
    fine_y += [(b[1] - trace_step, b[3] + trace_step) for b in trace_bounds]
    slanted = [b for poly in (*model.traces.values(), slot) for b in _slanted_boxes(poly)]
    fine_x += [(b[0] - fine, b[2] + fine) for b in slanted]
    fine_y += [(b[1] - fine, b[3] + fine) for b in slanted]
    step_y = min(fine, trace_step)

    mx = grade(sorted(fixed["x"]), max_cell, fine_x, fine)
    my = grade(sorted(fixed["y"]), max_cell, fine_y, step_y)
    zfixed = {z0, z1}
    for slab in model.slabs:
        zfixed.update(np.linspace(slab.z0, slab.z1, p.slab_cells + 1).tolist())
    slab_step = min(s.z1 - s.z0 for s in model.slabs) / p.slab_cells
    mz = grade(sorted(zfixed), max_cell, [(z0, z_levels["top"])], slab_step)
    return mx, my, mz


def _slot_spans(slot, axis: int) -> list[tuple[float, float]]:
    """Intervals along one axis covered by slot arms narrower than a tenth of the cut (where fine cells go)."""
    spans = []
    for poly in getattr(slot, "geoms", [slot]):
        for part in hole_free(poly):
            b = part.bounds
            lo, hi = b[axis], b[axis + 2]
            if hi - lo < 1.0:
                spans.append((lo, hi))
    return spans


def grade(fixed: list[float], max_cell: float, fine_spans: list[tuple[float, float]], fine: float,
          ratio: float = 1.4) -> np.ndarray:
    """Mesh lines through every ``fixed`` line: cells no larger than ``fine`` inside ``fine_spans`` and than
    ``max_cell`` elsewhere, growing by about ``ratio`` per cell away from fine spans and close fixed lines.

    A size field h(x) = min(max_cell, s_i + (ratio - 1) * distance to source i) is integrated between fixed
    lines; lines go where the integral of 1/h reaches whole numbers (rounded up, spread evenly)."""
    lines = np.unique(np.round(np.asarray(fixed, dtype=float), 9))
    lines = lines[np.concatenate([[True], np.diff(lines) > EDGE_TOL])]
    gaps = np.diff(lines)
    sources = [(lo, hi, fine) for lo, hi in fine_spans]
    sources += [(a, b, d) for a, b, d in zip(lines[:-1], lines[1:], gaps) if d < max_cell]
    src = np.asarray(sources, dtype=float).reshape(-1, 3)

    def size(x: np.ndarray) -> np.ndarray:
        if not len(src):
            return np.full_like(x, max_cell)
        dist = np.maximum(0.0, np.maximum(src[None, :, 0] - x[:, None], x[:, None] - src[None, :, 1]))
        return np.minimum(max_cell, (src[None, :, 2] + (ratio - 1) * dist).min(axis=1))

    out = [lines[:1]]
    for a, b in zip(lines[:-1], lines[1:]):
        xs = np.linspace(a, b, 257)
        inv = 1.0 / size(xs)
        cum = np.concatenate([[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(xs))])
        n = max(1, math.ceil(cum[-1] - 1e-6))
        out.append(np.interp(np.arange(1, n + 1) * cum[-1] / n, cum, xs))
    result = np.concatenate(out)
    result[-1] = lines[-1]
    return result
