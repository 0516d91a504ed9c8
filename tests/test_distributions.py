"""Quantiles and tail probabilities from scipy.special against scipy.stats (the reference).

Parameter ranges cover what bandsolve asks for: levels 0.5-0.9999 (interval levels, limit
levels α = 0.001-0.5, Bonferroni-divided levels), degrees of freedom from 1 to a few hundred
thousand (wavelengths × samples), statistics from 0 to far in the tail, and infinity.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from bandsolve import _distributions as dist

level = st.floats(1e-6, 1 - 1e-6)
dof = st.one_of(st.integers(1, 400), st.integers(400, 500_000)).map(float)
half_dof = st.floats(0.5, 2000.0)
statistic = st.floats(0.0, 1e4)


def _close(ours, theirs) -> None:
    np.testing.assert_allclose(ours, theirs, rtol=1e-10, atol=1e-300)


@settings(max_examples=200, deadline=None)
@given(q=level, df=dof, df2=dof, x=statistic)
def test_t_f_and_chi2_equal_scipy_stats(q, df, df2, x):
    # Reference library: scipy.stats distributions (their ppf/sf call these same functions).
    _close(dist.t_quantile(q, df), stats.t.ppf(q, df))
    _close(dist.t_sf(x, df), stats.t.sf(x, df))
    _close(dist.f_quantile(q, df, df2), stats.f.ppf(q, df, df2))
    _close(dist.f_sf(x, df, df2), stats.f.sf(x, df, df2))
    _close(dist.chi2_quantile(q, df), stats.chi2.ppf(q, df))
    _close(dist.chi2_sf(x, df), stats.chi2.sf(x, df))


@settings(max_examples=200, deadline=None)
@given(q=level, a=half_dof, b=half_dof)
def test_beta_and_normal_equal_scipy_stats(q, a, b):
    # scipy.stats.beta.ppf uses Boost's inverse directly; betaincinv is the same inverse of
    # the regularized incomplete beta, equal to within rounding.
    np.testing.assert_allclose(dist.beta_quantile(q, a, b), stats.beta.ppf(q, a, b),
                               rtol=1e-9, atol=1e-300)
    _close(dist.normal_quantile(q), stats.norm.ppf(q))
    _close(dist.normal_isf(q), stats.norm.isf(q))


def test_arrays_and_the_infinite_statistic():
    dfs = np.array([1.0, 5.0, 300.0])
    _close(dist.t_quantile(0.975, dfs), stats.t.ppf(0.975, dfs))
    # An infinite statistic has no tail beyond it (definition of the survival function).
    assert dist.f_sf(np.inf, 2, 10) == stats.f.sf(np.inf, 2, 10) == 0.0
    assert dist.t_sf(np.inf, 4) == stats.t.sf(np.inf, 4) == 0.0
    assert dist.chi2_sf(np.inf, 3) == 0.0
    # Textbook values (from memory): t_{0.975, 10} = 2.228, χ²_{0.95, 1} = 3.841.
    assert dist.t_quantile(0.975, 10) == pytest.approx(2.228, abs=5e-4)
    assert dist.chi2_quantile(0.95, 1) == pytest.approx(3.841, abs=5e-4)
