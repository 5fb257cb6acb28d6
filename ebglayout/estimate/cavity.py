"""Cavity-model resonances of a patch over a plane.

The patch and the plane below it form a thin cavity whose side walls are, to
first order, magnetic walls (the cavity model of the rectangular microstrip
patch; D. M. Pozar, Microwave Engineering, 4th ed., and C. A. Balanis, Antenna
Theory, 3rd ed., ch. 14).  For a cavity much thinner than a wavelength only the
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

import numpy as np
import shapely
from shapely import affinity
from shapely.geometry import MultiPolygon, Polygon

from ..errors import EbgError

C0 = 299_792_458.0
"""Speed of light in vacuum, m/s (exact, SI definition)."""

_MIN_CELLS = 8
_MAX_CELLS = 400


def rect_modes(a: float, b: float, er: float, n: int = 3) -> list[tuple[float, int, int]]:
    """Lowest ``n`` TMmn resonances (f_hz, m, n) of an a x b mm patch with magnetic side walls.

    f_mn = c / (2 sqrt(er)) * sqrt((m/a)^2 + (n/b)^2), (m, n) != (0, 0)
    (Pozar, Microwave Engineering, 4th ed., cavity model of the rectangular patch).
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
    rect = polygon.minimum_rotated_rectangle
    corners = np.asarray(rect.exterior.coords)[:4]
    edges = np.roll(corners, -1, axis=0) - corners
    lengths = np.hypot(edges[:, 0], edges[:, 1])
    longest = int(np.argmax(np.round(lengths, 9)))
    angle = math.degrees(math.atan2(edges[longest, 1], edges[longest, 0]))
    turned = affinity.rotate(polygon, -angle, origin=(0.0, 0.0))
    x0, y0, _, _ = turned.bounds
    return affinity.translate(turned, -x0, -y0)


def _as_polygon(geom) -> Polygon:
    if isinstance(geom, MultiPolygon) and len(geom.geoms) == 1:
        geom = geom.geoms[0]
    if not isinstance(geom, Polygon) or geom.is_empty or not geom.is_valid or geom.area <= 0:
        raise EbgError("patch polygon must be one valid, non-empty polygon")
    return geom


def _check_positive(**values: float) -> None:
    for key, value in values.items():
        if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
            raise EbgError(f"{key} = {value!r}: must be a finite number > 0")


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
    from scipy.sparse import coo_matrix, diags  # imported on use: rectangles never need scipy
    from scipy.sparse.csgraph import connected_components
    from scipy.sparse.linalg import eigsh

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
    stiff = diags(np.asarray(link.sum(axis=1)).ravel()) - link
    mass = diags(flat_area[used])
    parts, _ = connected_components(link, directed=False)
    want = n + parts
    if want >= size - 1:
        raise EbgError("patch polygon is too small or too thin for the cavity solve")
    scale = (math.pi / max(local.bounds[2], local.bounds[3])) ** 2
    v0 = np.random.default_rng(12345).standard_normal(size)
    lam = eigsh(stiff.tocsc(), k=want, M=mass.tocsc(), sigma=-1e-3 * scale, which="LM", v0=v0,
                return_eigenvectors=False)
    lam = np.sort(lam)
    return [float(v) for v in lam[parts:parts + n]]


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
