"""Interpolation of many spectra at once equals numpy.interp row by row, bit for bit."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from bandsolve._interp import BLOCK_ROWS, interp_rows


def _rowwise(x, xp, fp):
    # numpy.interp is the reference: the loop over it is what interp_rows replaces.
    return np.vstack([np.interp(x, xp, row) for row in fp])


@settings(max_examples=60, deadline=None)
@given(p=st.integers(2, 30), q=st.integers(1, 40), n=st.integers(1, 12),
       state=st.integers(0, 2**32 - 1))
def test_equals_numpy_interp_bit_for_bit(p, q, n, state):
    rng = np.random.default_rng(state)
    xp = np.sort(rng.choice(np.linspace(0.0, 10.0, 401), p, replace=False))
    # Points below, inside and above the axis, and some exactly on axis points.
    x = np.concatenate([rng.uniform(-1.0, 11.0, q), rng.choice(xp, 3)])
    fp = rng.standard_normal((n, p))
    fp[:, 0] = -0.0  # a signed zero must come back as it is where x hits an axis point
    got = interp_rows(x, xp, fp)
    assert np.array_equal(got.view(np.int64), _rowwise(x, xp, fp).view(np.int64))


def test_many_rows_across_blocks_on_a_rounded_axis():
    # A file axis written with 4 decimals (the common case that triggers resampling).
    rng = np.random.default_rng(12345)
    xp = np.linspace(400.0, 700.0, 300)
    fp = rng.standard_normal((2 * BLOCK_ROWS + 7, xp.size))
    x = np.round(xp, 4)
    assert np.array_equal(interp_rows(x, xp, fp), _rowwise(x, xp, fp))
