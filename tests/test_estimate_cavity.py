"""Cavity modes: closed form against hand arithmetic, numerical solve against independent references.

References used here, all outside ebglayout:
- the rectangular-patch cavity formula f_mn = c/(2 sqrt(er)) sqrt((m/a)^2 + (n/b)^2)
  (C. A. Balanis, Antenna Theory, 3rd ed., sec. 14.2.2, from memory), evaluated by hand;
- Neumann eigenvalues of the L-shaped domain [-1,1]^2 minus a quadrant, published values
  from memory: 1.4756, 3.5340, pi^2;
- a linear-triangle (P1) finite-element discretisation written in this file
  (stiffness e_i . e_j / (4 A), consistent mass A/12 (1 + delta_ij); any FE text, e.g.
  C. Johnson, Numerical Solution of PDEs by the Finite Element Method);
- Neumann modes of a disc, k = j'_mn / R with j'_mn the zeros of J_m' (Pozar's p'_nm for
  circular waveguide TE modes: 1.841, 3.054 from memory), taken from scipy.special.jnp_zeros.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from scipy.sparse import coo_matrix
from scipy.sparse.linalg import eigsh
from scipy.special import jnp_zeros
from shapely import affinity
from shapely.geometry import Point, Polygon, box

from ebglayout.errors import EbgError
from ebglayout.estimate.cavity import C0, neumann_eigenvalues, polygon_modes, rect_modes


def test_rect_modes_match_hand_computed_values_and_order():
    # hand-computed from the formula for a = 5 mm, b = 3 mm, er = 2.25 (sqrt(er) = 1.5):
    # f10 = c / (2 * 1.5 * 5e-3), f01 = c / (2 * 1.5 * 3e-3),
    # f11 = c / 3 * sqrt(200^2 + 333.33^2), f20 = 2 f10
    expected = [(19.986163867e9, 1, 0), (33.310273111e9, 0, 1), (38.846120023e9, 1, 1)]
    got = rect_modes(5.0, 3.0, 2.25, 3)
    assert [(m, n) for _, m, n in got] == [(m, n) for _, m, n in expected]
    for (f, _, _), (ref, _, _) in zip(got, expected):
        assert f == pytest.approx(ref, rel=1e-9)
    assert rect_modes(5.0, 3.0, 2.25, 4)[3][0] == pytest.approx(39.972327733e9, rel=1e-9)


def test_rect_modes_skip_the_static_mode_and_scale_with_er():
    modes = rect_modes(2.0, 2.0, 1.0, 3)
    assert all((m, n) != (0, 0) for _, m, n in modes)
    assert modes[0][0] == pytest.approx(C0 / (2 * 2e-3), rel=1e-12)
    assert modes[0][0] == pytest.approx(modes[1][0], rel=1e-12)  # square: TM10 and TM01 coincide
    assert rect_modes(2.0, 2.0, 4.0, 1)[0][0] == pytest.approx(modes[0][0] / 2, rel=1e-12)


def _placed(poly: Polygon, angle: float) -> Polygon:
    """The polygon turned and moved like a placed cell, on the engine's 1 nm grid."""
    turned = affinity.rotate(poly, angle, origin=(0, 0))
    return shapely.set_precision(affinity.translate(turned, 31.7, -12.3), 1e-6)


@pytest.mark.parametrize("a, b, angle", [
    (4.6, 2.4, 0.0), (3.0, 3.0, 90.0), (6.3, 2.2, 37.0), (2.96, 2.8, -45.0), (5.0, 1.0, 12.5), (1.5, 4.0, 160.0),
])
def test_numerical_solve_matches_the_rectangle_formula_within_1_percent(a, b, angle):
    er = 4.1
    numeric = polygon_modes(_placed(box(-a / 2, -b / 2, a / 2, b / 2), angle), er)
    analytic = [f for f, _, _ in rect_modes(a, b, er, 3)]
    assert len(numeric) == 3
    for f_num, f_ref in zip(numeric, analytic):
        assert f_num == pytest.approx(f_ref, rel=0.01)


L_SHAPE = Polygon([(-1, -1), (1, -1), (1, 0), (0, 0), (0, 1), (-1, 1)])
L_SHAPE_PUBLISHED = (1.4756, 3.5340, math.pi ** 2)
"""Neumann eigenvalues of the L-shaped domain, from memory (widely tabulated benchmark values)."""


def _p1_neumann_eigenvalues(nodes: np.ndarray, tris: np.ndarray, n: int) -> list[float]:
    """Lowest n non-zero eigenvalues of the P1 finite-element Neumann Laplacian on a triangle mesh."""
    p = nodes[tris]
    opposite = np.stack([p[:, 2] - p[:, 1], p[:, 0] - p[:, 2], p[:, 1] - p[:, 0]], axis=1)
    d1, d2 = p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]
    area = np.abs(d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0]) / 2
    k_loc = np.einsum("tik,tjk->tij", opposite, opposite) / (4 * area[:, None, None])
    m_loc = area[:, None, None] / 12 * (np.ones((3, 3)) + np.eye(3))
    rows = np.repeat(tris, 3, axis=1).ravel()
    cols = np.tile(tris, (1, 3)).ravel()
    size = len(nodes)
    stiff = coo_matrix((k_loc.ravel(), (rows, cols)), shape=(size, size)).tocsc()
    mass = coo_matrix((m_loc.ravel(), (rows, cols)), shape=(size, size)).tocsc()
    v0 = np.random.default_rng(1).standard_normal(size)
    lam = np.sort(eigsh(stiff, k=n + 1, M=mass, sigma=-1e-3, which="LM", v0=v0, return_eigenvectors=False))
    return [float(v) for v in lam[1:]]


def _grid_mesh(points: np.ndarray, keep: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Triangles of a structured (ns+1) x (nt+1) node array ``points``, two per kept quad."""
    ns, nt = keep.shape
    idx = np.arange((ns + 1) * (nt + 1)).reshape(ns + 1, nt + 1)
    i, j = np.nonzero(keep)
    a, b, c, d = idx[i, j], idx[i + 1, j], idx[i + 1, j + 1], idx[i, j + 1]
    tris = np.concatenate([np.stack([a, b, c], 1), np.stack([a, c, d], 1)])
    used = np.unique(tris)
    remap = np.full(idx.size, -1)
    remap[used] = np.arange(len(used))
    return points.reshape(-1, 2)[used], remap[tris]


def test_l_shape_against_published_values_and_a_finite_element_solve():
    numeric = neumann_eigenvalues(L_SHAPE, 3)
    for lam, ref in zip(numeric, L_SHAPE_PUBLISHED):
        assert lam == pytest.approx(ref, rel=0.02)

    n = 48
    s = np.linspace(-1, 1, n + 1)
    points = np.stack(np.meshgrid(s, s, indexing="ij"), -1)
    centres = (s[:-1] + s[1:]) / 2
    cx, cy = np.meshgrid(centres, centres, indexing="ij")
    nodes, tris = _grid_mesh(points, ~((cx > 0) & (cy > 0)))
    fem = _p1_neumann_eigenvalues(nodes, tris, 3)
    for lam, ref in zip(numeric, fem):
        assert lam == pytest.approx(ref, rel=0.02)
    # the two discretisations bracket the first eigenvalue: P1 from above, the finite volumes from below
    assert numeric[0] < fem[0]


def test_slanted_quadrilateral_against_a_finite_element_solve():
    corners = np.array([(0.0, 0.0), (4.0, 0.3), (3.2, 2.6), (0.6, 2.2)])
    ns, nt = 80, 50
    s, t = np.meshgrid(np.linspace(0, 1, ns + 1), np.linspace(0, 1, nt + 1), indexing="ij")
    bottom = corners[0] + (corners[1] - corners[0]) * s[..., None]
    top = corners[3] + (corners[2] - corners[3]) * s[..., None]
    points = bottom + (top - bottom) * t[..., None]
    nodes, tris = _grid_mesh(points, np.ones((ns, nt), bool))
    fem = _p1_neumann_eigenvalues(nodes, tris, 3)
    poly = _placed(Polygon(corners), 23.0)
    numeric = neumann_eigenvalues(poly, 3)
    for lam, ref in zip(numeric, fem):
        assert lam == pytest.approx(ref, rel=0.02)
    er = 3.6
    for f, lam in zip(polygon_modes(poly, er), numeric):
        assert f == pytest.approx(C0 * math.sqrt(lam) * 1e3 / (2 * math.pi * math.sqrt(er)), rel=1e-9)


def test_disc_against_bessel_derivative_zeros():
    radius = 1.7
    disc = Point(5.0, 5.0).buffer(radius, quad_segs=64)
    j11, j21 = jnp_zeros(1, 1)[0], jnp_zeros(2, 1)[0]
    assert j11 == pytest.approx(1.841, abs=1e-3) and j21 == pytest.approx(3.054, abs=1e-3)
    expected = [(j11 / radius) ** 2, (j11 / radius) ** 2, (j21 / radius) ** 2]
    for lam, ref in zip(neumann_eigenvalues(disc, 3), expected):
        assert math.sqrt(lam) == pytest.approx(math.sqrt(ref), rel=0.01)


def test_pocketed_patch_against_a_finite_element_solve_and_perturbation_signs():
    """A bridged cell's patch: pockets cut midway along both long edges.

    Sign check from first-order domain perturbation of Neumann eigenvalues (Hadamard's
    formula, d lambda ~ -integral over the removed region of (|grad u|^2 - lambda u^2); from
    memory): the pockets sit where TM10 has its current maximum and field null, so TM10 drops,
    and where TM01 has its field maximum and no current, so TM01 rises.
    """
    a, b, half_w, depth = 3.6, 3.0, 0.21, 0.45
    pockets = [box(-half_w, b / 2 - depth, half_w, b / 2), box(-half_w, -b / 2, half_w, -b / 2 + depth)]
    patch = box(-a / 2, -b / 2, a / 2, b / 2).difference(pockets[0]).difference(pockets[1])
    numeric = neumann_eigenvalues(_placed(patch, 90.0), 3)

    step = 0.03
    xs, ys = np.linspace(-a / 2, a / 2, round(a / step) + 1), np.linspace(-b / 2, b / 2, round(b / step) + 1)
    points = np.stack(np.meshgrid(xs, ys, indexing="ij"), -1)
    cx, cy = np.meshgrid((xs[:-1] + xs[1:]) / 2, (ys[:-1] + ys[1:]) / 2, indexing="ij")
    in_pocket = (np.abs(cx) < half_w) & (np.abs(cy) > b / 2 - depth)
    fem = _p1_neumann_eigenvalues(*_grid_mesh(points, ~in_pocket), 3)
    for lam, ref in zip(numeric, fem):
        assert lam == pytest.approx(ref, rel=0.02)

    tm10, tm01 = (math.pi / a) ** 2, (math.pi / b) ** 2
    assert numeric[0] < tm10
    assert numeric[1] > tm01


def test_solve_is_deterministic():
    patch = _placed(box(0, 0, 3.4, 3.0).difference(box(1.5, 2.5, 1.9, 3.0)), 33.0)
    assert polygon_modes(patch, 4.1) == polygon_modes(patch, 4.1)


@pytest.mark.parametrize("bad", [Polygon(), Polygon([(0, 0), (1, 1), (1, 0), (0, 1)])])
def test_bad_polygons_raise(bad):
    with pytest.raises(EbgError):
        polygon_modes(bad, 4.1)


@pytest.mark.parametrize("kwargs", [dict(er=0.0), dict(er=float("nan")), dict(er=4.0, n=0), dict(er=4.0, accuracy=0)])
def test_bad_numbers_raise(kwargs):
    with pytest.raises(EbgError):
        polygon_modes(box(0, 0, 2, 1), **kwargs)
