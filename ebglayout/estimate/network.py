"""Circuit model of the drawn filter: the pair as coupled lines, each patch a cavity in series with the return path.

The traces are coupled lines (``lines``) referenced to the cut plane.  Where a trace crosses a slot (the Layout's
full crossings; nothing here re-derives geometry) its return current must leave one copper body and reach the
next.  The plane around the cut is taken as the ground of the plane beyond (both are the reference, tied by
stitching); a patch is a cavity between its drawn polygon and the plane beyond, with magnetic side walls, seen
from one port per crossing on its edge (``cavity.port_modes``: the modal expansion of a planar circuit).  A
crossing from body a onto body b inserts, in series with the trace, the voltage V_b - V_a of the two cavities at
that crossing, driven by the trace currents of every crossing on them.  The trace section over a patch stays a
line referenced to the patch, so its shunt current flows into the patch's cavity: that is what makes a
bridged cell's LC resonance (patch capacitance, bridge inductance) a notch.

Bridges tie the patch edge to the plane through an inductance: the bridge as a short strip over the plane
beyond, L = Z0_air l / c, with Z0_air the strip's impedance in air by Hammerstad and Jensen (1980) at the cavity
height (the inductance per length of a strip over a plane, not the free-space bar).  A stripline pair sees its
two cut planes' series elements in parallel (both return paths carry part of the current).

Loss: dielectric loss of the lines and cavities from tan d; copper loss on the lines (``lines``) and in the
cavities as an added loss tangent delta_s / h (the conductor Q of a thin cavity, Q_c = h / delta_s; C. A.
Balanis, Antenna Theory, 3rd ed., sec. 14.2; from memory).  Left out, and said so in the docs: radiation, the
slot's own gap capacitance and edge fringing (the ideal magnetic wall), the trace length over the slot as
anything but line, the P/N length difference of a bend, and any resonance of the outer planes.

Solved per frequency as one nodal admittance matrix (line sections, crossing branches) reduced to the four
ports in the project's order (``sparams``), then scikit-rf's Network.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely
from shapely.geometry import Point, Polygon

from ..crossing import TOUCH_MM
from ..errors import EbgError
from ..layout import Layout
from ..stackup import Stackup
from .cavity import C0, MU0, PortModes, port_modes
from .lines import COPPER_S_PER_M, CoupledLines, microstrip_single, pair_lines
from .lumped import bridge_width

SOURCE = "model: coupled lines and cavity modal expansion (ebglayout estimate)"
KEEP_FACTOR = 3.0
"""Modes up to this many times the highest wavenumber asked for are kept with their resonance; the rest enter
as the quasi-static tail (their error there is below (1 / 3)^2 = 11 % of their own small share)."""
STATION_MM = 1e-4
"""Crossings of the two traces closer than this along the path share one station of the line model."""


@dataclass(frozen=True)
class _Branch:
    """One crossing of one trace on one cut plane: where, which trace, from which body onto which."""

    layer: str
    trace: int
    s: float
    point: tuple[float, float]
    width: float
    bodies: tuple[str, str]


def filter_network(layout: Layout, freq_hz, *, stackup: Stackup | None = None, z0_ohm: float | None = None):
    """The filter as a scikit-rf 4-port (ports: P near, N near, P far, N far) at ``freq_hz`` (Hz, > 0).

    ``stackup`` overrides the layout's (for tolerance corners); ``z0_ohm`` is the reference impedance of every
    port (default: sqrt(Z0e Z0o) of the pair, near a match for both modes).
    """
    import skrf

    freq = np.asarray(freq_hz, dtype=float)
    if freq.ndim != 1 or not len(freq) or not np.all(np.isfinite(freq)) or np.any(freq <= 0):
        raise EbgError("freq_hz: must be a non-empty list of finite frequencies > 0")
    stackup = stackup or layout.stackup
    spec = layout.spec
    lines = pair_lines(stackup, spec.pair_width, spec.pair_spacing)
    z0 = z0_ohm if z0_ohm is not None else math.sqrt(lines.even.z0 * lines.odd.z0)
    y = port_admittance(layout, freq, stackup, lines)
    eye = np.eye(4)[None]
    s = np.linalg.solve(eye + z0 * y, eye - z0 * y)
    return skrf.Network(frequency=skrf.Frequency.from_f(freq, unit="hz"), s=s, z0=z0, name=spec.name)


def port_admittance(layout: Layout, freq: np.ndarray, stackup: Stackup, lines: CoupledLines) -> np.ndarray:
    """Admittance matrices (F, 4, 4) of the whole filter at its four ports."""
    branches = _branches(layout)
    length = layout.centreline.length
    stations = sorted({round(b.s / STATION_MM) for b in branches})
    positions = [0.0] + [k * STATION_MM for k in stations] + [length]
    station_of = {k: i + 1 for i, k in enumerate(stations)}
    # node numbering: per position and trace a left and a right node; they are one node where nothing crosses
    crossed = {(station_of[round(b.s / STATION_MM)], b.trace) for b in branches}
    left, right, count = {}, {}, 0
    for i in range(len(positions)):
        for t in (0, 1):
            left[i, t] = count
            count += 1
            if (i, t) in crossed:
                count += 1
            right[i, t] = count - 1
    nodes = np.zeros((len(freq), count, count), dtype=complex)
    for i in range(len(positions) - 1):
        span = positions[i + 1] - positions[i]
        if span <= 0:
            continue
        idx = [right[i, 0], right[i, 1], left[i + 1, 0], left[i + 1, 1]]
        nodes[:, np.ix_(idx, idx)[0], np.ix_(idx, idx)[1]] += section_admittance(lines, freq, span * 1e-3)
    for layer in dict.fromkeys(b.layer for b in branches):
        mine = [b for b in branches if b.layer == layer]
        z_branch = _branch_impedance(layout, mine, freq, stackup)
        incidence = np.zeros((len(mine), count))
        for k, b in enumerate(mine):
            at = station_of[round(b.s / STATION_MM)]
            incidence[k, left[at, b.trace]] += 1.0
            incidence[k, right[at, b.trace]] -= 1.0
        nodes += incidence.T[None] @ np.linalg.inv(z_branch) @ incidence[None]
    ports = [left[0, 0], left[0, 1], right[len(positions) - 1, 0], right[len(positions) - 1, 1]]
    inner = [k for k in range(count) if k not in ports]
    ypp = nodes[:, ports][:, :, ports]
    if not inner:
        return ypp
    ypi = nodes[:, ports][:, :, inner]
    yip = nodes[:, inner][:, :, ports]
    yii = nodes[:, inner][:, :, inner]
    return ypp - ypi @ np.linalg.solve(yii, yip)


def section_admittance(lines: CoupledLines, freq: np.ndarray, length_m: float) -> np.ndarray:
    """Admittance (F, 4, 4) of a coupled-line section, nodes [P end 1, N end 1, P end 2, N end 2].

    Each mode is a uniform line: y11 = Y0 coth(gamma l), y12 = -Y0 csch(gamma l) (Pozar, Microwave Engineering,
    4th ed., sec. 4.4, from memory); the even mode is driven by (V_P + V_N) / 2 and carries equal strip currents,
    the odd mode by (V_P - V_N) / 2 with opposite ones.
    """
    out = np.zeros((len(freq), 4, 4), dtype=complex)
    for mode, mode_line, sign in (("even", lines.even, 1.0), ("odd", lines.odd, -1.0)):
        gl = lines.gamma(freq, mode) * length_m
        y11 = 1 / (mode_line.z0 * np.tanh(gl))
        y12 = -1 / (mode_line.z0 * np.sinh(gl))
        ends = np.stack([np.stack([y11, y12], -1), np.stack([y12, y11], -1)], -2)
        traces = np.array([[1.0, sign], [sign, 1.0]]) / 2
        out += np.einsum("fab,ij->faibj", ends, traces).reshape(len(freq), 4, 4)
    return out


def _branches(layout: Layout) -> list[_Branch]:
    """Every full crossing of either trace on every cut plane, in the model's terms."""
    out = []
    for c in layout.crossings:
        if c.kind != "full":
            continue
        trace = 0 if c.polarity == "P" else 1
        out.append(_Branch(c.layer, trace, c.s_centre, c.point, layout.trace(c.polarity).width, c.bodies))
    return out


def _branch_impedance(layout: Layout, branches: list[_Branch], freq: np.ndarray, stackup: Stackup) -> np.ndarray:
    """Series impedance matrix (F, B, B) of one cut plane's crossings: sum over patches of sign x cavity Z x sign."""
    cut = layout.cut(branches[0].layer)
    plane = next(p for p in stackup.planes if p.layer == cut.layer)
    cavity = plane.cavity
    patches = list(cut.patch.geoms)
    bridges = list(cut.bridge.geoms)
    k_keep = KEEP_FACTOR * 2 * math.pi * float(freq.max()) * math.sqrt(cavity.er) / C0 * 1e-3
    z = np.zeros((len(freq), len(branches), len(branches)), dtype=complex)
    used = sorted({int(name[5:]) for b in branches for name in b.bodies if name.startswith("patch")})
    for j in used:
        patch = patches[j]
        on = [(k, (1.0 if b.bodies[1] == f"patch{j}" else 0.0) - (1.0 if b.bodies[0] == f"patch{j}" else 0.0))
              for k, b in enumerate(branches) if f"patch{j}" in b.bodies]
        ties = [g for g in bridges if g.distance(patch) < TOUCH_MM]
        segments = [_edge_port(patch, branches[k].point, branches[k].width) for k, _ in on]
        segments += [_tie_port(patch, g) for g in ties]
        modes = _cached_modes(patch, segments, k_keep)
        z_cav = modes.impedance(freq, cavity.er, cavity.h, cavity.tan_d + _copper_tan_d(freq, cavity.h))
        z_cav = _tie_bridges(z_cav, len(on), [_bridge_inductance(g, layout.spec.bridge_length, cavity.h)
                                               for g in ties], freq)
        idx = [k for k, _ in on]
        sign = np.array([s for _, s in on])
        z[:, np.ix_(idx, idx)[0], np.ix_(idx, idx)[1]] += z_cav * np.outer(sign, sign)[None]
    return z


def _copper_tan_d(freq: np.ndarray, h_mm: float) -> np.ndarray:
    """Copper loss of the cavity as an added loss tangent delta_s / h (see the module docstring)."""
    skin = 1.0 / np.sqrt(np.pi * freq * MU0 * COPPER_S_PER_M)
    return skin / (h_mm * 1e-3)


def _tie_bridges(z: np.ndarray, crossings: int, inductances: list[float], freq: np.ndarray) -> np.ndarray:
    """Crossing-port impedance with each bridge port closed by its inductance to the plane."""
    if not inductances:
        return z
    c, b = slice(0, crossings), slice(crossings, None)
    load = z[:, b, b] + np.einsum("f,ij->fij", 2j * np.pi * freq, np.diag(inductances))
    return z[:, c, c] - z[:, c, b] @ np.linalg.solve(load, z[:, b, c])


def _bridge_inductance(bridge: Polygon, bridge_length: float | None, h_mm: float) -> float:
    """L = Z0_air l / c of a bridge as a strip over the plane beyond (Hammerstad and Jensen's Z0 in air)."""
    length = bridge_length if bridge_length else max(bridge.minimum_rotated_rectangle.length / 2 - 0, 1e-3)
    width = bridge_width(bridge, length)
    return microstrip_single(width / h_mm, 1.0).z0 * length * 1e-3 / C0


def _edge_port(patch: Polygon, point: tuple[float, float], width: float):
    """The patch-edge segment, one trace width long, nearest a crossing (where its return current enters)."""
    ring = patch.exterior
    at = ring.project(Point(point))
    ends = [ring.interpolate((at + d) % ring.length) for d in (-width / 2, width / 2)]
    return tuple((p.x, p.y) for p in ends)


def _tie_port(patch: Polygon, bridge: Polygon):
    """The segment along which a bridge meets its patch."""
    touch = shapely.get_coordinates(shapely.intersection(bridge.buffer(TOUCH_MM), patch.exterior))
    if len(touch) < 2:
        raise EbgError("bridge: does not meet its patch along an edge")
    d = touch - touch.mean(axis=0)
    axis = np.linalg.svd(d, full_matrices=False)[2][0]
    t = d @ axis
    return tuple(map(tuple, (touch.mean(axis=0) + t.min() * axis, touch.mean(axis=0) + t.max() * axis)))


_MODES: dict[tuple, PortModes] = {}


def _cached_modes(patch: Polygon, segments: list, k_keep: float) -> PortModes:
    """``port_modes``, solved once per drawn shape (relative to its first vertex) and port layout."""
    origin = np.asarray(patch.exterior.coords[0])
    rel = np.round((shapely.get_coordinates(patch) - origin) / 1e-6).astype(np.int64).tobytes()
    ports = np.round((np.asarray(segments, dtype=float).reshape(-1, 2) - origin) / 1e-6).astype(np.int64).tobytes()
    key = (rel, ports, round(k_keep, 6))
    if key not in _MODES:
        if len(_MODES) > 512:
            _MODES.clear()
        _MODES[key] = port_modes(patch, segments, k_keep)
    return _MODES[key]
