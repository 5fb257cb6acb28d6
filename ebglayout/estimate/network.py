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

The cavity's walls sit a little outside the drawn edge: the fringing field beyond the edge stores charge as if
the patch were longer by the open-end extension dl on every side (E. O. Hammerstad, "Equations for microstrip
circuit design", Proc. 5th European Microwave Conf., 1975, the form Balanis, Antenna Theory, 3rd ed., eq. 14-2,
uses for the patch's effective length; from memory).  The modes are solved on the drawn polygon grown by dl
(mitred corners), the ports stay on the drawn edge.

Loss: dielectric loss of the lines and cavities from tan d; copper loss on the lines (``lines``) and in the
cavities as an added loss tangent delta_s / h (the conductor Q of a thin cavity, Q_c = h / delta_s; C. A.
Balanis, Antenna Theory, 3rd ed., sec. 14.2; from memory), and radiation through the slots around the patch as
one more, 1 / Q_rad (``radiation_tan_d``): a slot between patch and plane carries the cavity's edge voltage as a
magnetic current over a ground plane, as a patch antenna's radiating edge does, so the patch antenna's
radiation Q applies; the effective loss tangent 1 / Q is how Balanis (same section) puts every loss into the
cavity model.  Left out, and said so in the docs: the slot's own gap capacitance to the plane around it, the
plane around the cut as anything but the plane beyond (ideal stitching), the trace length over the slot as
anything but line, the P/N length difference of a bend, and any resonance of the outer planes.

Solved per frequency as one nodal admittance matrix (line sections, crossing branches) reduced to the four
ports in the project's order (``sparams``), then scikit-rf's Network.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
import shapely
from shapely.geometry import Point, Polygon

from ..crossing import TOUCH_MM
from ..errors import EbgError
from ..layout import Layout
from ..stackup import Stackup
from .cavity import C0, MU0, PortModes, own_frame, port_modes
from .lines import COPPER_S_PER_M, CoupledLines, microstrip_single, pair_lines
from .lumped import bridge_width

SOURCE = "model: coupled lines and cavity modal expansion (ebglayout estimate)"
KEEP_FACTOR = 3.0
"""Modes up to this many times the highest wavenumber asked for are kept with their resonance; the rest enter
as the quasi-static tail with its first frequency term (their error there is below (1 / 3)^4 = 1.2 % of their
own small share)."""
CHUNK = 2048
"""Frequencies solved together.  Each chunk repeats the geometry work (groups, ports, cached modes), so chunks
are large: a 2,000-point sweep is one (its matrices are a few MB)."""
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


def filter_network(layout: Layout, freq_hz, *, stackup: Stackup | None = None, z0_ohm: float | None = None,
                   copper: bool = True):
    """The filter as a scikit-rf 4-port (ports: P near, N near, P far, N far) at ``freq_hz`` (Hz, > 0).

    ``stackup`` overrides the layout's (for tolerance corners); ``z0_ohm`` is the reference impedance of every
    port (default: sqrt(Z0e Z0o) of the pair, near a match for both modes); ``copper`` False makes every
    conductor perfect, as in a full-wave run with lossless copper (the only fair comparison with one).
    """
    import skrf

    freq = np.asarray(freq_hz, dtype=float)
    if freq.ndim != 1 or not len(freq) or not np.all(np.isfinite(freq)) or np.any(freq <= 0):
        raise EbgError("freq_hz: must be a non-empty list of finite frequencies > 0")
    stackup = stackup or layout.stackup
    spec = layout.spec
    lines = pair_lines(stackup, spec.pair_width, spec.pair_spacing, copper)
    z0 = z0_ohm if z0_ohm is not None else math.sqrt(lines.even.z0 * lines.odd.z0)
    with _blas().limit(limits=1, user_api="blas"):
        y = np.concatenate([port_admittance(layout, freq[k:k + CHUNK], stackup, lines)
                            for k in range(0, len(freq), CHUNK)])
    eye = np.eye(4)[None]
    s = np.linalg.solve(eye + z0 * y, eye - z0 * y)
    return skrf.Network(frequency=skrf.Frequency.from_f(freq, unit="hz"), s=s, z0=z0, name=spec.name)


@functools.cache
def _blas():
    """threadpoolctl's handle on the loaded BLAS.  The model's matrices are a few ports across, far too small for
    threads: a threaded BLAS spends longer waking and syncing its threads than computing (measured 3.4 times
    slower on 2 busy cores), so the solve runs the BLAS on one thread."""
    from threadpoolctl import ThreadpoolController

    return ThreadpoolController()


def port_admittance(layout: Layout, freq: np.ndarray, stackup: Stackup, lines: CoupledLines) -> np.ndarray:
    """Admittance matrices (F, 4, 4) of the whole filter at its four ports.

    Crossings that share a cavity (and everything between them) form one group (``_group_transfer``); the
    groups and the plain line between them are chained as 4 x 4 transfer (ABCD) matrices.
    """
    chain = None
    at = 0.0
    solved: dict[bytes, np.ndarray] = {}
    for start, end, group in _groups(_branches(layout)):
        key = _group_key(layout, group, start)
        if key not in solved:
            solved[key] = _group_transfer(layout, group, freq, stackup, lines)
        step = solved[key]
        if start > at:
            step = section_transfer(lines, freq, (start - at) * 1e-3) @ step
        chain = step if chain is None else chain @ step
        at = end
    tail = section_transfer(lines, freq, (layout.centreline.length - at) * 1e-3)
    chain = tail if chain is None else chain @ tail
    return _admittance_from_transfer(chain)


def _group_key(layout: Layout, group: list[_Branch], start: float) -> bytes:
    """The group's crossings and the copper of its cavities relative to its first crossing, in 1 nm steps:
    groups drawn alike (the cells of a row) are solved once."""
    origin = np.asarray(group[0].point)
    parts = []
    for b in group:
        parts.append(repr((b.layer, b.trace, round((b.s - start) / STATION_MM), round(b.width / 1e-6),
                           [name == "plane" for name in b.bodies])).encode())
        parts.append(np.round((np.asarray(b.point) - origin) / 1e-6).astype(np.int64).tobytes())
    for layer, name in sorted({(b.layer, n) for b in group for n in b.bodies if n.startswith("patch")}):
        cut = layout.cut(layer)
        patch = cut.patch.geoms[int(name[5:])]
        ties = [g for g in cut.bridge.geoms if g.distance(patch) < TOUCH_MM]
        for geom in (patch, *ties):
            parts.append(np.round((shapely.get_coordinates(geom) - origin) / 1e-6).astype(np.int64).tobytes())
    return b"|".join(parts)


def _groups(branches: list[_Branch]) -> list[tuple[float, float, list[_Branch]]]:
    """Crossings grouped so that no cavity is shared between groups, each with its span along the path (mm)."""
    spans: list[list] = []
    for b in sorted(branches, key=lambda b: b.s):
        bodies = {(b.layer, name) for name in b.bodies if name.startswith("patch")}
        joined = [g for g in spans if g[3] & bodies or g[1] >= b.s - STATION_MM]
        if joined:
            first = joined[0]
            for g in joined[1:]:
                first[1] = max(first[1], g[1])
                first[2].extend(g[2])
                first[3] |= g[3]
                spans.remove(g)
            first[1] = max(first[1], b.s)
            first[2].append(b)
            first[3] |= bodies
        else:
            spans.append([b.s, b.s, [b], bodies])
    # a later crossing on an earlier group's cavity merges every group between them as well
    merged: list[list] = []
    for g in sorted(spans, key=lambda g: g[0]):
        if merged and (merged[-1][3] & g[3] or merged[-1][1] >= g[0] - STATION_MM):
            merged[-1][1] = max(merged[-1][1], g[1])
            merged[-1][2].extend(g[2])
            merged[-1][3] |= g[3]
        else:
            merged.append(g)
    return [(g[0], g[1], g[2]) for g in merged]


def _group_transfer(layout: Layout, branches: list[_Branch], freq: np.ndarray, stackup: Stackup,
                    lines: CoupledLines) -> np.ndarray:
    """Transfer matrix (F, 4, 4) of one group, from just before its first crossing to just after its last.

    Unknowns: the state [V_P, V_N, I_P, I_N] where the group starts, and the current through every crossing
    (one per station and trace; crossings of two cut planes at one place share it, their series elements in
    parallel).  Walking the stations in order, the lines carry the state forward and each crossing subtracts
    its series voltage; every crossing's current must equal the trace current where it sits.  That linear
    system gives the state at the end in terms of the state at the start.
    """
    station_of = {k: i for i, k in enumerate(sorted({round(b.s / STATION_MM) for b in branches}))}
    slots = sorted({(station_of[round(b.s / STATION_MM)], b.trace) for b in branches})
    slot_of = {slot: j for j, slot in enumerate(slots)}
    count, n_freq = len(slots), len(freq)
    layers = list(dict.fromkeys(b.layer for b in branches))
    z_slots = None
    y_slots = np.zeros((n_freq, count, count), dtype=complex)
    for layer in layers:
        mine = [b for b in branches if b.layer == layer]
        to_slot = np.zeros((len(mine), count))
        for k, b in enumerate(mine):
            to_slot[k, slot_of[station_of[round(b.s / STATION_MM)], b.trace]] = 1.0
        z_layer = _branch_impedance(layout, mine, freq, stackup, lines.copper_s_per_m is not None)
        if len(layers) == 1 and np.all(to_slot.sum(axis=0) == 1):  # one plane: the crossings are the slots
            z_slots = to_slot.T @ z_layer @ to_slot
        else:
            y_slots += to_slot.T @ np.linalg.inv(z_layer) @ to_slot
    if z_slots is None:
        z_slots = np.linalg.inv(y_slots)
    positions = [k * STATION_MM for k in sorted(station_of)]
    # the state in terms of [start state | crossing currents]: one product per line section carries both
    state = np.zeros((n_freq, 4, 4 + count), dtype=complex)
    state[:, :, :4] = np.eye(4)
    lhs = np.zeros((n_freq, count, count), dtype=complex)
    rhs = np.zeros((n_freq, count, 4), dtype=complex)
    steps: dict[int, np.ndarray] = {}
    for station, at in enumerate(positions):
        if station:
            gap = round((at - positions[station - 1]) / STATION_MM)
            if gap not in steps:
                steps[gap] = section_transfer(lines, freq, -gap * STATION_MM * 1e-3)
            state = steps[gap] @ state
        here = [(slot_of[station, t], t) for t in (0, 1) if (station, t) in slot_of]
        for j, t in here:
            lhs[:, j, :] = -state[:, 2 + t, 4:]
            lhs[:, j, j] += 1.0
            rhs[:, j, :] = state[:, 2 + t, :4]
        for j, t in here:
            state[:, t, 4:] -= z_slots[:, j, :]
    forward = state[:, :, :4] + state[:, :, 4:] @ np.linalg.solve(lhs, rhs)
    return np.linalg.inv(forward)


def _admittance_from_transfer(t: np.ndarray) -> np.ndarray:
    """The inverse of ``_transfer_from_admittance``."""
    a, b, c, d = t[:, :2, :2], t[:, :2, 2:], t[:, 2:, :2], t[:, 2:, 2:]
    inv_b = np.linalg.inv(b)
    top = np.concatenate([d @ inv_b, c - d @ inv_b @ a], axis=2)
    bottom = np.concatenate([-inv_b, inv_b @ a], axis=2)
    return np.concatenate([top, bottom], axis=1)


def section_transfer(lines: CoupledLines, freq: np.ndarray, length_m: float) -> np.ndarray:
    """Transfer matrix (F, 4, 4) of a coupled-line section: per mode A = D = cosh(gamma l), B = Z0 sinh(gamma l),
    C = sinh(gamma l) / Z0 (Pozar, Microwave Engineering, 4th ed., Table 4.1; from memory), each mode acting on
    its own share of the P/N voltages and currents (even: the mean, odd: half the difference)."""
    out = np.zeros((len(freq), 4, 4), dtype=complex)
    for mode, mode_line, sign in (("even", lines.even, 1.0), ("odd", lines.odd, -1.0)):
        gl = lines.gamma(freq, mode) * length_m
        ch, sh = np.cosh(gl), np.sinh(gl)
        blocks = np.stack([np.stack([ch, mode_line.z0 * sh], -1), np.stack([sh / mode_line.z0, ch], -1)], -2)
        out += _per_trace(blocks, sign)
    return out


def _per_trace(blocks: np.ndarray, sign: float) -> np.ndarray:
    """A mode's (F, 2, 2) end-to-end matrix spread over the traces: rows and columns [P1, N1, P2, N2], the mode
    taking (V_P + sign V_N) / 2 and giving its current to P and sign x it to N."""
    share = np.array([[1.0, sign], [sign, 1.0]]) / 2
    return (blocks[:, :, None, :, None] * share[None, None, :, None, :]).reshape(len(blocks), 4, 4)


def _branches(layout: Layout) -> list[_Branch]:
    """Every full crossing of either trace on every cut plane, in the model's terms."""
    out = []
    for c in layout.crossings:
        if c.kind != "full":
            continue
        trace = 0 if c.polarity == "P" else 1
        out.append(_Branch(c.layer, trace, c.s_centre, c.point, layout.trace(c.polarity).width, c.bodies))
    return out


def _branch_impedance(layout: Layout, branches: list[_Branch], freq: np.ndarray, stackup: Stackup,
                      copper: bool) -> np.ndarray:
    """Series impedance matrix (F, B, B) of one cut plane's crossings: sum over patches of sign x cavity Z x sign
    (``copper`` False: perfect conductors)."""
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
        grown = patch.buffer(edge_extension(patch, cavity.h, cavity.er), join_style="mitre")
        modes = _cached_modes(grown, segments, k_keep)
        copper_tan_d = _copper_tan_d(freq, cavity.h) if copper else 0.0
        loss = cavity.tan_d + copper_tan_d + radiation_tan_d(patch, freq, cavity.h, cavity.er)
        z_cav = modes.impedance(freq, cavity.er, cavity.h, loss)
        z_cav = _tie_bridges(z_cav, len(on), [_bridge_inductance(g, layout.spec.bridge_length, cavity.h)
                                               for g in ties], freq)
        idx = [k for k, _ in on]
        sign = np.array([s for _, s in on])
        z[:, np.ix_(idx, idx)[0], np.ix_(idx, idx)[1]] += z_cav * np.outer(sign, sign)[None]
    return z


def edge_extension(patch: Polygon, h_mm: float, er: float) -> float:
    """Open-end extension dl (mm) of the patch's edges, Hammerstad's form (see the module docstring):
    dl / h = 0.412 (eeff + 0.3) (W/h + 0.264) / ((eeff - 0.258) (W/h + 0.8)), W the patch's narrower side
    (for the patches drawn here W >> h, where dl barely depends on W), eeff Hammerstad and Jensen's at W/h."""
    rect = own_frame(patch).bounds
    u = min(rect[2], rect[3]) / h_mm
    eeff = microstrip_single(u, er).eeff
    return h_mm * 0.412 * (eeff + 0.3) * (u + 0.264) / ((eeff - 0.258) * (u + 0.8))


def radiation_tan_d(patch: Polygon, freq: np.ndarray, h_mm: float, er: float) -> np.ndarray:
    """Radiation through the slots around a patch as an added loss tangent 1 / Q_rad (see the module docstring).

    Q_rad = 3 er L / (16 p c1 W) x lambda0 / h, c1 = 1 - 1/er + 2 / (5 er^2), p = 1 - 0.16605 (k0 W)^2 / 20
    + 0.00761 x 3 (k0 W)^4 / 560 - 0.0914153 (k0 L)^2 / 5: D. R. Jackson and N. G. Alexopoulos, "Simple
    approximate formulas for input resistance, bandwidth, and efficiency of a resonant rectangular patch",
    IEEE Trans. AP 39(3), 1991 (from memory), for the mode along the long side L of the patch's rectangle.
    """
    _, _, length, width = own_frame(patch).bounds
    k0 = 2 * np.pi * freq / C0 * 1e-3  # 1/mm
    c1 = 1 - 1 / er + 2 / (5 * er ** 2)
    p = 1 - 0.16605 * (k0 * width) ** 2 / 20 + 0.00761 * 3 * (k0 * width) ** 4 / 560 - 0.0914153 * (k0 * length) ** 2 / 5
    q_rad = 3 * er * length / (16 * p * c1 * width) * (2 * np.pi / k0) / h_mm
    return 1 / q_rad


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
    if not bridge_length:
        raise EbgError("cut.bridge.length = (missing): a bridged cell's bridges need a length for the model")
    length = bridge_length
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
