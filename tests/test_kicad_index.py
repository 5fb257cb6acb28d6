"""The board's bounding-box grid index returns exactly what a brute-force window test returns (seeded random data)."""
from __future__ import annotations

import numpy as np
import pytest

from ebglayout.kicad.board import BoxIndex


@pytest.mark.parametrize("seed", range(5))
def test_box_index_matches_brute_force(seed):
    rng = np.random.default_rng(seed)
    n = 5000
    lo = rng.uniform(0, 200, size=(n, 2))
    size = rng.exponential(0.5, size=(n, 2))
    size[rng.choice(n, 20, replace=False)] *= 200  # a few very long tracks
    hi = lo + size
    index = BoxIndex(lo, hi)
    for _ in range(200):
        x0, y0 = rng.uniform(-10, 210, 2)
        x1, y1 = x0 + rng.exponential(5), y0 + rng.exponential(5)
        brute = np.flatnonzero((lo[:, 0] <= x1) & (hi[:, 0] >= x0) & (lo[:, 1] <= y1) & (hi[:, 1] >= y0))
        assert np.array_equal(index.query(x0, y0, x1, y1), brute)


def test_empty_index():
    index = BoxIndex(np.zeros((0, 2)), np.zeros((0, 2)))
    assert len(index) == 0 and len(index.query(0, 0, 1, 1)) == 0
