"""The shared variance-function fit: the boundary likelihood-ratio test against scipy.

The fit itself is checked against an independent maximisation of the likelihood in
``test_validated.py`` and its two-column NNLS against scipy in ``test_cls_statistics.py``.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from bandsolve.variance_function import boundary_lr_p, fit_variance, log_likelihood


def test_boundary_lr_p_is_half_the_chi2_tail():
    # Self & Liang (1987): a variance term tested at its boundary 0 has the reference
    # ½χ²₀ + ½χ²₁, so p = ½·P(χ²₁ ≥ LR) for LR > 0 (scipy.stats.chi2).
    rng = np.random.default_rng(4)
    c2 = rng.uniform(0, 1, 50)
    d = rng.normal(0, np.sqrt(1 + 0.5 * c2)) ** 2
    with_term, without = 1 + 0.5 * c2, np.full(50, 1.2)
    lr = 2 * (np.sum(stats.norm.logpdf(np.sqrt(d), 0, np.sqrt(with_term)))
              - np.sum(stats.norm.logpdf(np.sqrt(d), 0, np.sqrt(without))))
    assert log_likelihood(d, with_term) - log_likelihood(d, without) == pytest.approx(lr / 2)
    expected = 0.5 * stats.chi2.sf(lr, 1) if lr > 0 else 1.0
    assert boundary_lr_p(d, with_term, without) == pytest.approx(expected, rel=1e-10)
    assert boundary_lr_p(d, without, without) == 1.0  # no improvement: nothing to keep


def test_fit_variance_recovers_known_components():
    # Consistency of the Gaussian likelihood estimator (theory): 20 000 errors with
    # Var = s² + 0.3 + 2·c², fitted to convergence.
    rng = np.random.default_rng(6)
    n = 20000
    s2, c2 = rng.uniform(0.1, 0.5, n), rng.uniform(0, 1, n)
    d = rng.normal(0, np.sqrt(s2 + 0.3 + 2 * c2)) ** 2
    theta = fit_variance(d, s2, np.column_stack([np.ones(n), c2]), 200, 1e-10)
    assert theta == pytest.approx([0.3, 2.0], rel=0.1)
