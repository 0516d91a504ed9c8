"""The shared variance-function fit: the boundary likelihood-ratio test against scipy.

The fit is checked against an independent maximisation of the likelihood (scipy.optimize),
here and in ``test_validated.py``; its two-column NNLS against scipy in
``test_cls_statistics.py``.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, stats

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


@settings(max_examples=60, deadline=None)
@given(n=st.integers(8, 30), spread=st.floats(0.0, 3.0), zeros=st.floats(0.0, 0.7),
       stream=st.integers(0, 2**32 - 1))
def test_fit_variance_reaches_the_likelihood_maximum(n, spread, zeros, stream):
    # The fit is the maximum of the Gaussian likelihood over θ ≥ 0 (Carroll & Ruppert 1988):
    # no point Nelder–Mead finds (scipy.optimize, on log-parameters) is better, and neither
    # is θ = 0. SEs spanning up to three decades and many zero levels, as in pure-standard
    # calibrations, made the plain iteration swing between two points.
    rng = np.random.default_rng(stream)
    s2 = 10.0 ** rng.uniform(-spread, 0.0, n)
    c2 = np.where(rng.uniform(size=n) < zeros, 0.0, rng.uniform(0.05, 1.0, n)) ** 2
    d = rng.normal(0, np.sqrt(s2 + rng.uniform(0, 0.5) + rng.uniform(0, 2) * c2)) ** 2
    cols = np.column_stack([np.ones(n), c2])
    theta = fit_variance(d, s2, cols, 200, 1e-10)
    ours = log_likelihood(d, s2 + cols @ theta)
    ref = optimize.minimize(lambda x: -log_likelihood(d, s2 + cols @ np.exp(x)),
                            np.zeros(2), method="Nelder-Mead",
                            options={"xatol": 1e-9, "fatol": 1e-12, "maxiter": 4000})
    assert ours >= -ref.fun - 1e-6 * abs(ref.fun)
    assert ours >= log_likelihood(d, s2) - 1e-12
