"""The one-pass prediction kernel (bandsolve._scan) against plain numpy."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from bandsolve._scan import SLICE_ROWS, ScanParts, scan


@settings(max_examples=40, deadline=None)
@given(st.integers(1, 2 * SLICE_ROWS + 3), st.integers(2, 40), st.integers(1, 30),
       st.integers(0, 10**6))
def test_products_sums_of_squares_and_maxima_equal_numpy(n, p, width, seed):
    # Reference: numpy's X @ M, Σ w x² and max per row, whatever the number of rows (slices)
    # and columns (one product, or column groups when wider than WIDEST_PRODUCT).
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    M = rng.normal(size=(p, width))
    w = rng.uniform(0.5, 2.0, p)
    H, ss, top = scan(X, ScanParts(M, w))
    np.testing.assert_allclose(H, X @ M, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(ss, (X**2) @ w, rtol=1e-12)
    np.testing.assert_array_equal(top, X.max(axis=1))
