"""Cavity-model resonances of a patch over a plane.

The patch and the plane below it form a thin cavity whose side walls are, to
first order, magnetic walls (the cavity model of the rectangular microstrip
patch; C. A. Balanis, Antenna Theory, 3rd ed., sec. 14.2.2, from memory).
For a cavity much thinner than a wavelength only the
TMmn modes with no field variation across the thickness matter, and their
field E_z obeys the 2D Helmholtz equation -lap(u) = k^2 u on the patch shape
with the Neumann condition du/dn = 0 on its edge.  The resonance is then
f = c k / (2 pi sqrt(er)), independent of the cavity height.

``rect_modes`` is the closed form for a rectangle; ``polygon_modes`` solves the
same eigenproblem numerically on the drawn polygon (pockets, holes, any angle).
Fringing (the effective-length extension of the patch edges) is left out of
both, so both describe the same ideal cavity.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely
from shapely import affinity
from shapely.geometry import LineString, MultiPolygon, Polygon

from ..errors import EbgError
from ..errors import check_positive as _check_positive
from ..physics import C0, MU0

_MIN_CELLS = 8
_MAX_CELLS = 400


def rect_modes(a: float, b: float, er: float, n: int = 3) -> list[tuple[float, int, int]]:
    """Lowest ``n`` TMmn resonances (f_hz, m, n) of an a x b mm patch with magnetic side walls.

    f_mn = c / (2 sqrt(er)) * sqrt((m/a)^2 + (n/b)^2), (m, n) != (0, 0)
    (C. A. Balanis, Antenna Theory, 3rd ed., sec. 14.2.2, cavity model of the rectangular patch, from memory).
    Ties are ordered by (m, n).
    """
    _check_positive(a=a, b=b, er=er)
    if n < 1:
        raise EbgError(f"n = {n}: must be at least 1")
    out = []
    for m in range(n + 1):
        for k in range(n + 1):
            if m or k:
                f = C0 / (2 * math.sqrt(er)) * math.hypot(m / (a * 1e-3), k / (b * 1e-3))
                out.append((f, m, k))
    out.sort(key=lambda t: (round(t[0], 3), t[1], t[2]))
    return out[:n]


def polygon_modes(polygon: Polygon, er: float, n: int = 3, accuracy: float = 0.01) -> list[float]:
    """Lowest ``n`` non-zero cavity resonances (Hz) of the drawn patch ``polygon`` (mm).

    The polygon is turned into its own frame (the long side of its minimum
    rotated rectangle along x), so the edges of the patches this tool draws lie
    on grid lines.  The Neumann eigenproblem is solved by a cell-centred finite
    volume scheme (five-point Laplacian; a link across the boundary carries no
    flux, which is the discrete Neumann condition) with cut cells for edges off
    the grid, on two nested grids, and the two results are combined by
    Richardson extrapolation for a second-order scheme (L. F. Richardson, 1911).
    ``accuracy`` is the relative error the coarse grid is sized for; the
    extrapolated result is normally several times better.
    """
    _check_positive(er=er, accuracy=accuracy)
    if n < 1:
        raise EbgError(f"n = {n}: must be at least 1")
    lams = neumann_eigenvalues(polygon, n, accuracy)
    return [C0 * math.sqrt(lam) * 1e3 / (2 * math.pi * math.sqrt(er)) for lam in lams]


def neumann_eigenvalues(polygon: Polygon, n: int = 3, accuracy: float = 0.01) -> list[float]:
    """Lowest ``n`` non-zero Neumann Laplacian eigenvalues k^2 (1/mm^2) of ``polygon``, Richardson-extrapolated."""
    local = own_frame(_as_polygon(polygon))
    step = _grid_step(local, n, accuracy)
    coarse = _eigenvalues(local, n, step, 1)
    fine = _eigenvalues(local, n, step, 2)
    return [f + (f - c) / 3.0 for c, f in zip(coarse, fine)]


def own_frame(polygon: Polygon) -> Polygon:
    """Rotate ``polygon`` so its minimum rotated rectangle's long side lies along x; move it to x, y >= 0."""
    return _to_frame(polygon, *_frame_of(polygon))


def _frame_of(polygon: Polygon) -> tuple[float, float, float]:
    """(angle in degrees, x shift, y shift) that ``own_frame`` applies: rotate about the origin, then shift."""
    rect = polygon.minimum_rotated_rectangle
    corners = np.asarray(rect.exterior.coords)[:4]
    edges = np.roll(corners, -1, axis=0) - corners
    lengths = np.hypot(edges[:, 0], edges[:, 1])
    longest = int(np.argmax(np.round(lengths, 9)))
    angle = math.degrees(math.atan2(edges[longest, 1], edges[longest, 0]))
    x0, y0, _, _ = affinity.rotate(polygon, -angle, origin=(0.0, 0.0)).bounds
    return angle, -x0, -y0


def _to_frame(geom, angle: float, dx: float, dy: float):
    return affinity.translate(affinity.rotate(geom, -angle, origin=(0.0, 0.0)), dx, dy)


def _as_polygon(geom) -> Polygon:
    if isinstance(geom, MultiPolygon) and len(geom.geoms) == 1:
        geom = geom.geoms[0]
    if not isinstance(geom, Polygon) or geom.is_empty or not geom.is_valid or geom.area <= 0:
        raise EbgError("patch polygon must be one valid, non-empty polygon")
    return geom



def _grid_step(local: Polygon, n: int, accuracy: float) -> float:
    """Coarse-grid step (mm) for which the n-th mode's raw error is about ``accuracy``.

    The five-point Laplacian gives k_h^2 = (2/h)^2 sin^2(k h / 2) for a plane wave,
    so the relative frequency error is about (k h)^2 / 24; k of the n-th mode is
    taken from the bounding rectangle's closed form.
    """
    _, _, a, b = local.bounds
    _, m, k = rect_modes(a, b, 1.0, n)[-1]
    k_n = math.pi * math.hypot(m / a, k / b)
    step = math.sqrt(24 * accuracy) / k_n
    step = min(step, max(a, b) / _MIN_CELLS, min(a, b) / 3)
    return max(step, max(a, b) / _MAX_CELLS)


def _grid_lines(local: Polygon, axis: int, step: float, refine: int) -> np.ndarray:
    """Grid lines along one axis: through every edge parallel to the other axis, then split to ``step``."""
    hi = local.bounds[2 + axis]
    tol = 1e-5 * max(local.bounds[2], local.bounds[3])
    marks = [0.0, hi]
    for ring in (local.exterior, *local.interiors):
        pts = np.asarray(ring.coords)
        same = np.abs(np.diff(pts[:, axis])) <= tol
        marks.extend(pts[:-1][same, axis])
    marks = np.sort(np.asarray(marks))
    keep = np.concatenate(([True], np.diff(marks) > tol))
    marks = marks[keep]
    marks[0], marks[-1] = 0.0, hi
    lines = [marks[:1]]
    for lo, up in zip(marks[:-1], marks[1:]):
        parts = max(1, math.ceil((up - lo) / step - 1e-9)) * refine
        lines.append(np.linspace(lo, up, parts + 1)[1:])
    return np.concatenate(lines)


def _eigenvalues(local: Polygon, n: int, step: float, refine: int) -> list[float]:
    """Lowest n non-zero eigenvalues of the finite-volume Neumann Laplacian on one grid."""
    return [float(v) for v in _eigen(_Operator(local, step, refine), n, vectors=False)[0]]


class _Operator:
    """The finite-volume Neumann Laplacian of one polygon on one grid: stiffness, cell areas (mass), the grid."""

    def __init__(self, local: Polygon, step: float, refine: int):
        self.local = local
        self.xs, self.ys, self.area, self.used, self.stiff, self.parts = _assemble(local, step, refine)

    def cells_at(self, points: np.ndarray) -> np.ndarray:
        """Row in the operator of the cell under each point (local frame); a point in no used cell takes the
        nearest used cell's row."""
        nx, ny = len(self.xs) - 1, len(self.ys) - 1
        ix = np.clip(np.searchsorted(self.xs, points[:, 0]) - 1, 0, nx - 1)
        iy = np.clip(np.searchsorted(self.ys, points[:, 1]) - 1, 0, ny - 1)
        rows = np.full(nx * ny, -1)
        rows[self.used] = np.arange(len(self.used))
        out = rows[ix * ny + iy]
        if (out < 0).any():
            cx = (self.xs[:-1] + self.xs[1:]) / 2
            cy = (self.ys[:-1] + self.ys[1:]) / 2
            centres = np.stack([cx[self.used // ny], cy[self.used % ny]], axis=1)
            for k in np.flatnonzero(out < 0):
                out[k] = int(np.argmin(np.hypot(*(centres - points[k]).T)))
        return out


def _eigen(op: _Operator, n: int, vectors: bool) -> tuple[np.ndarray, np.ndarray | None]:
    """Lowest n non-zero eigenpairs; vectors are mass-normalised (sum of area x value^2 = 1)."""
    from scipy.sparse import diags
    from scipy.sparse.linalg import eigsh

    size = len(op.used)
    want = n + op.parts
    if want >= size - 1:
        raise EbgError("patch polygon is too small or too thin for the cavity solve")
    local = op.local
    scale = (math.pi / max(local.bounds[2], local.bounds[3])) ** 2
    v0 = np.random.default_rng(12345).standard_normal(size)
    mass = diags(op.area)
    found = eigsh(op.stiff.tocsc(), k=want, M=mass.tocsc(), sigma=-1e-3 * scale, which="LM", v0=v0,
                  return_eigenvectors=vectors)
    lam, vec = found if vectors else (found, None)
    order = np.argsort(lam)[op.parts:op.parts + n]
    return lam[order], (vec[:, order] if vectors else None)


def _assemble(local: Polygon, step: float, refine: int):
    """Grid lines, used cells' areas and flat indices, stiffness matrix and number of connected parts."""
    from scipy.sparse import coo_matrix, diags  # imported on use: rectangles never need scipy
    from scipy.sparse.csgraph import connected_components

    xs = _grid_lines(local, 0, step, refine)
    ys = _grid_lines(local, 1, step, refine)
    nx, ny = len(xs) - 1, len(ys) - 1
    shapely.prepare(local)

    x0, y0 = np.meshgrid(xs[:-1], ys[:-1], indexing="ij")
    x1, y1 = np.meshgrid(xs[1:], ys[1:], indexing="ij")
    boxes = shapely.box(x0, y0, x1, y1)
    area = np.where(shapely.contains(local, boxes), (x1 - x0) * (y1 - y0), 0.0)
    edge = shapely.intersects(local.boundary, boxes)
    area[edge] = shapely.area(shapely.intersection(boxes[edge], local))

    index = np.arange(nx * ny).reshape(nx, ny)
    # conductance of a face = its open length / distance between the two cell centres
    across_x = _open_length(local, xs[1:-1], ys, 0) / np.diff((xs[:-1] + xs[1:]) / 2)[:, None]
    across_y = _open_length(local, ys[1:-1], xs, 1).T / np.diff((ys[:-1] + ys[1:]) / 2)[None, :]
    links = [(index[:-1, :], index[1:, :], across_x, area[:-1, :] * area[1:, :]),
             (index[:, :-1], index[:, 1:], across_y, area[:, :-1] * area[:, 1:])]
    i = np.concatenate([a[(g > 0) & (both > 0)] for a, _, g, both in links])
    j = np.concatenate([b[(g > 0) & (both > 0)] for _, b, g, both in links])
    g = np.concatenate([g[(g > 0) & (both > 0)] for _, _, g, both in links])

    flat_area = area.ravel()
    used = np.flatnonzero(flat_area > 0)
    remap = np.full(nx * ny, -1)
    remap[used] = np.arange(len(used))
    i, j = remap[i], remap[j]
    size = len(used)
    link = coo_matrix((g, (i, j)), shape=(size, size)).tocsr()
    link = link + link.T
    stiff = (diags(np.asarray(link.sum(axis=1)).ravel()) - link).tocsr()
    parts, _ = connected_components(link, directed=False)
    return xs, ys, flat_area[used], used, stiff, parts


def _open_length(local: Polygon, lines: np.ndarray, spans: np.ndarray, axis: int) -> np.ndarray:
    """Length inside ``local`` of each face on the grid lines ``lines`` (normal to ``axis``), per span interval."""
    at = np.broadcast_to(lines[:, None], (len(lines), len(spans) - 1))
    lo = np.broadcast_to(spans[None, :-1], at.shape)
    hi = np.broadcast_to(spans[None, 1:], at.shape)
    ends = [np.stack([at, lo], -1), np.stack([at, hi], -1)] if axis == 0 else \
        [np.stack([lo, at], -1), np.stack([hi, at], -1)]
    faces = shapely.linestrings(np.stack(ends, -2))
    length = np.where(shapely.contains(local, faces), hi - lo, 0.0)
    cut = shapely.intersects(local.boundary, faces)
    length[cut] = shapely.length(shapely.intersection(faces[cut], local))
    return length


@dataclass(frozen=True, eq=False)
class PortModes:
    """The cavity seen from its ports: what its multi-port impedance needs, independent of er, h and frequency.

    ``k2`` are the non-zero modes kept explicitly (1/mm^2), ``phi`` each mode's normalised field
    (integral of phi^2 over the patch = 1, phi in 1/mm) averaged over each port, and ``tail`` the
    quasi-static sums over all higher modes, sum phi_i phi_j / k^2 and sum phi_i phi_j / k^4 (what the
    truncated series leaves out: the patch's spreading inductance between ports, and its first frequency
    correction, 1 / (k_n^2 - k^2) = 1 / k_n^2 + k^2 / k_n^4 + ...).  ``method`` is "analytic" or "numeric".
    """

    area_mm2: float
    k2: np.ndarray
    phi: np.ndarray
    tail: tuple[np.ndarray, np.ndarray]
    method: str

    def impedance(self, freq_hz: np.ndarray, er: float, h_mm: float, loss_tangent: float) -> np.ndarray:
        """Port impedance matrices (F, P, P) in ohm of the patch-over-plane cavity with magnetic side walls.

        Z_ij = j w mu0 h [ sum_n phi_n(i) phi_n(j) / (k_n^2 - k^2) ], the static mode phi_0 = 1 / sqrt(A)
        included (it gives 1 / (j w C) with C = e A / h), k^2 = w^2 mu0 e0 er (1 - j loss_tangent):
        the modal expansion of a planar circuit (T. Okoshi, Planar Circuits for Microwaves and Lightwaves,
        Springer 1985, ch. 2) in the form used for power/ground-plane pairs (G.-T. Lei, R. W. Techentin and
        B. K. Gilbert, IEEE Trans. MTT 47(5), 1999; from memory).  Ports are averaged over their width.
        """
        f = np.asarray(freq_hz, dtype=float)
        omega = 2 * np.pi * f
        k2 = (omega / C0) ** 2 * er * (1 - 1j * loss_tangent) * 1e-6  # 1/mm^2
        weights = np.einsum("ki,kj->kij", self.phi, self.phi)  # (K, P, P)
        series = np.tensordot(1.0 / (self.k2[None, :] - k2[:, None]), weights, axes=(1, 0))
        series += (1.0 / self.area_mm2) / (-k2)[:, None, None] + self.tail[0][None] + k2[:, None, None] * self.tail[1]
        return 1j * omega[:, None, None] * MU0 * h_mm * 1e-3 * series


_TAIL_MODES = 240
"""Highest mode index per axis summed into a rectangle's quasi-static tail (the port averaging makes the
terms fall as 1/n^4 beyond the port width's own scale)."""


def port_modes(polygon: Polygon, ports: list[tuple[tuple[float, float], tuple[float, float]]], k_keep: float,
               accuracy: float = 0.01) -> PortModes:
    """Modal data of the patch ``polygon`` seen from ``ports`` (segments in the polygon's coordinates, mm).

    Modes with k up to ``k_keep`` (1/mm) are kept explicitly; every higher one enters the quasi-static
    tail.  A plain rectangle uses the closed-form modes (phi_mn = chi_m chi_n cos(m pi x / a) cos(n pi y / b)
    / sqrt(a b), chi_0 = 1, chi_k = sqrt 2), averaged exactly along each port segment, and the tail's double
    series; any other patch the numerical modes of ``polygon_modes`` on its finer grid, and a tail from one
    static solve (the sum over all non-zero modes of phi phi / k^2 is the Neumann Laplacian's inverse on the
    mean-free space).
    """
    from .band import is_rectangle

    poly = _as_polygon(polygon)
    frame = _frame_of(poly)
    segs = np.array([np.asarray(_to_frame(LineString(seg), *frame).coords) for seg in ports]).reshape(-1, 2, 2)
    local = _to_frame(poly, *frame)
    if is_rectangle(poly):
        return _rectangle_port_modes(local.bounds[2], local.bounds[3], segs, k_keep)
    return _numeric_port_modes(local, segs, k_keep, accuracy)


def _rectangle_port_modes(a: float, b: float, segs: np.ndarray, k_keep: float) -> PortModes:
    m = np.arange(_TAIL_MODES + 1)
    mm, nn = (g.ravel() for g in np.meshgrid(m, m, indexing="ij"))
    keep_pos = (mm + nn) > 0
    mm, nn = mm[keep_pos], nn[keep_pos]
    k2 = (np.pi * mm / a) ** 2 + (np.pi * nn / b) ** 2
    chi = np.where(mm > 0, math.sqrt(2), 1.0) * np.where(nn > 0, math.sqrt(2), 1.0) / math.sqrt(a * b)
    alpha, beta = np.pi * mm / a, np.pi * nn / b
    phi = np.empty((len(k2), len(segs)))
    for j, ((x0, y0), (x1, y1)) in enumerate(segs):
        # cos(ax) cos(by) = (cos(ax + by) + cos(ax - by)) / 2, each averaged along the segment exactly
        phi[:, j] = chi * (_mean_cos(alpha * x0 + beta * y0, alpha * (x1 - x0) + beta * (y1 - y0))
                           + _mean_cos(alpha * x0 - beta * y0, alpha * (x1 - x0) - beta * (y1 - y0))) / 2
    kept = k2 <= k_keep ** 2
    tail = tuple(np.einsum("ki,kj->ij", phi[~kept] / k2[~kept, None] ** p, phi[~kept]) for p in (1, 2))
    order = np.argsort(k2[kept], kind="stable")
    return PortModes(a * b, k2[kept][order], phi[kept][order], tail, "analytic")


def _mean_cos(c: np.ndarray, d: np.ndarray) -> np.ndarray:
    """Mean of cos(c + d t) over t in [0, 1]."""
    small = np.abs(d) < 1e-9
    safe = np.where(small, 1.0, d)
    return np.where(small, np.cos(c), (np.sin(c + d) - np.sin(c)) / safe)


def _numeric_port_modes(local: Polygon, segs: np.ndarray, k_keep: float, accuracy: float) -> PortModes:
    from scipy.sparse.linalg import splu

    _, _, a, b = local.bounds
    area = local.area
    # Weyl's law with its perimeter term bounds how many modes lie below k_keep; a few more for safety
    count = int(area * k_keep ** 2 / (4 * math.pi) + local.length * k_keep / (4 * math.pi)) + 3
    step = _grid_step(local, count, accuracy)
    coarse_op = _Operator(local, step, 1)
    fine_op = _Operator(local, step, 2)
    coarse, _ = _eigen(coarse_op, count, vectors=False)
    fine, vec = _eigen(fine_op, count, vectors=True)
    k2 = fine + (fine - coarse) / 3.0
    t = (np.arange(16) + 0.5) / 16
    ports = np.zeros((len(fine_op.used), len(segs)))
    for j, (p0, p1) in enumerate(segs):
        rows = fine_op.cells_at(p0[None, :] + t[:, None] * (p1 - p0)[None, :])
        np.add.at(ports[:, j], rows, 1.0 / len(t))
    phi = vec.T @ ports
    # static solves: stiffness x = (right side minus its mean part), one cell pinned, then made mean-free;
    # x1 = S p and x2 = S M S p, with S = sum over non-zero modes of v v^T / lambda
    mass = fine_op.area
    lu = splu(fine_op.stiff[1:, 1:].tocsc())

    def solve(rhs: np.ndarray) -> np.ndarray:
        rhs = rhs - np.outer(mass, rhs.sum(axis=0)) / mass.sum()
        x = np.zeros_like(rhs)
        x[1:] = lu.solve(rhs[1:])
        return x - (mass @ x) / mass.sum()

    x1 = solve(ports)
    x2 = solve(mass[:, None] * x1)
    kept = k2 <= k_keep ** 2
    tail = tuple(ports.T @ x - np.einsum("ki,kj->ij", phi[kept] / fine[kept, None] ** p, phi[kept])
                 for p, x in ((1, x1), (2, x2)))
    return PortModes(area, k2[kept], phi[kept], tail, "numeric")
